"""The global fit: Efimov parameters straight from raw decay curves, every curve of a
campaign at once (:func:`fit_curves`; :func:`prepare_curves` without sampling).

The parameter space and the systematics' priors live in :mod:`.campaign_space`, the
likelihood and its treatment of the per-curve nuisances in :mod:`.curves_likelihood`;
measured accuracy, cost and coverage in docs/global-fit.md.
"""

__all__ = ["CurvesLikelihood", "CampaignSpace", "CampaignPosterior", "fit_curves", "prepare_curves",
           "SYSTEMATIC_NAMES"]


import math
import warnings

import numpy as np
from scipy.optimize import minimize

from ..data.curves import check_curves
from ..dimer_kinetics import DEFAULT_DEPTH_OVER_T
from ..errors import LossfitValueError, ValidityWarning
from ..experiment.feshbach import FeshbachResonance, resonance_scattering_length
from ..species import species as _lookup_species
from ..universal.models import DEFAULT_MODEL, get_model
from .campaign_space import EXTRA_NAMES, RESONANCE_NAMES, SYSTEMATIC_NAMES, CampaignSpace, systematic_priors
from .curve_fits import fit_curve
from .curves_likelihood import CurvesLikelihood
from .parameters import default_priors
from .posterior import Posterior, WalkerBlocks, check_run_settings, coerce_priors, interactive, make_result, walker_ball
from .priors import Normal
from .sampling import open_backend, sample, stop_record

#: The global fit's posterior is the library's: its likelihood reads every nuisance
#: from the values dict (:meth:`CurvesLikelihood.given_values`).
CampaignPosterior = Posterior


#: Largest extra reach of the T tables for resonance shifts and field noise (ln T on
#: each side; each 0.16 adds a knot per side, and the thermal averages' cost grows with
#: the knots).
MAX_SHIFT_MARGIN = 0.5


def _knot_shift_margin(curves, resonance, sys_priors, nodes):
    """Extra reach of the curves' T tables (ln T) that lets 99 % of the priors' draws of
    the resonance parameters and the field noise reuse the prepared thermal averages
    (2 |ln rho| of the most moved curve, at the outermost of ``nodes`` Gauss-Hermite nodes
    of the field noise), at most :data:`MAX_SHIFT_MARGIN`; 0 when nothing moves a."""
    names = [n for n in RESONANCE_NAMES + ("sigma_B",) if n in sys_priors]
    fields = np.array([c.field for c in curves if c.field is not None], dtype=float)
    if not names or fields.size == 0:
        return 0.0
    rng = np.random.default_rng(0)
    draws = {n: sys_priors[n].sample(rng, 4000)[:, None, None] for n in names}
    b0, width, a_bg = (draws.get(n, getattr(resonance, n)) for n in RESONANCE_NAMES)
    outermost = math.sqrt(2.0) * np.max(np.polynomial.hermite.hermgauss(int(nodes))[0]) if "sigma_B" in draws else 0.0
    moved = fields[None, :, None] + draws.get("sigma_B", 0.0) * np.array([-outermost, 0.0, outermost])
    nominal = resonance_scattering_length(fields, resonance.b0, resonance.width, resonance.a_bg)[None, :, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        spread = 2.0 * np.abs(np.log(resonance_scattering_length(moved, b0, width, a_bg) / nominal)).max(axis=(1, 2))
    spread = spread[np.isfinite(spread)]
    return min(float(np.quantile(spread, 0.99)), MAX_SHIFT_MARGIN) if spread.size else 0.0


def prepare_curves(curves, *, species, free, model=None, priors=None, resonance=None, systematics=None,
                   fixed=None, tie=None, heating=True, recombination_heating_nK=0.0, inner_steps=1,
                   field_noise_nodes=7, rtol=None, density_sigma=None):
    """Parameter space, likelihood and posterior of a global fit, without sampling.

    Arguments as in :func:`fit_curves`. The per-curve least-squares fits made here give
    the nuisance reference (refresh it at the posterior mode with
    :meth:`CurvesLikelihood.refresh` before sampling) and the default prior ranges.

    Returns
    -------
    space : CampaignSpace
    likelihood : CurvesLikelihood
    posterior : CampaignPosterior
    """
    curves = check_curves(curves)
    if resonance is not None and not isinstance(resonance, FeshbachResonance):
        raise LossfitValueError("resonance", "must be a lossfit.FeshbachResonance (its b0, width, a_bg "
                                "are the systematics)")
    sp = _lookup_species(species)
    mdl = get_model(DEFAULT_MODEL if model is None else model)
    free = [free] if isinstance(free, str) else list(free)
    if "density_scale" in free:
        # lossfit.fit's spelling of the density nuisance
        free.remove("density_scale")
        if systematics and "density_scale" in systematics:
            raise LossfitValueError("density_sigma", "density_scale is both in free and in systematics")
        if density_sigma is None and not (priors and "density_scale" in priors):
            raise LossfitValueError("density_sigma", "give the width of the density-scale prior "
                                    "(e.g. density_sigma=0.2) or priors['density_scale']")
        systematics = dict(systematics or {})
        systematics["density_scale"] = (priors or {}).get("density_scale", density_sigma)
    bad = [n for n in free if n in EXTRA_NAMES]
    if bad:
        raise LossfitValueError("free", f"give systematics {bad} through systematics=")
    sys_priors, correlated = systematic_priors(systematics, resonance)
    fixed = dict(fixed or {})
    for n in sys_priors:
        if n in fixed:
            raise LossfitValueError("fixed", f"{n!r} is both a sampled systematic and fixed")
    field_noise = "sigma_B" in sys_priors or fixed.get("sigma_B", 0.0) > 0
    if field_noise and resonance is None:
        raise LossfitValueError("resonance", "field noise sigma_B needs the resonance a(B)")

    # stage 1: per-curve fits give the reference nuisances and the default prior ranges
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        th = np.broadcast_to(np.asarray(recombination_heating_nK, dtype=float), (len(curves),))
        fits = [fit_curve(c, species=sp, resonance=resonance, heating=heating,
                          recombination_heating_nK=float(th[j])) for j, c in enumerate(curves)]
    s_range = (1.0, 1.0)
    if "temperature_scale" in sys_priors:
        draws = sys_priors["temperature_scale"].sample(np.random.default_rng(0), 4000)
        s_range = (float(draws.min()), float(draws.max()))
    elif "temperature_scale" in fixed:
        s_range = (float(fixed["temperature_scale"]),) * 2
    shift = _knot_shift_margin(curves, resonance, sys_priors, field_noise_nodes)
    likelihood = CurvesLikelihood(curves, sp, mdl, resonance=resonance, reference_fits=fits, heating=heating,
                                  recombination_heating_nK=recombination_heating_nK,
                                  temperature_scale_range=s_range, field_noise=field_noise,
                                  field_noise_nodes=field_noise_nodes, inner_steps=inner_steps, rtol=rtol,
                                  shift_margin=shift)
    user_priors = coerce_priors(priors)
    all_priors = default_priors([n for n in free if n not in user_priors], likelihood.two_stage_spectra)
    all_priors.update(user_priors)
    all_priors.update(sys_priors)
    space = CampaignSpace(free + [n for n in SYSTEMATIC_NAMES if n in sys_priors], all_priors,
                          fixed=fixed, tie=tie, correlated=correlated)
    likelihood.set_eta_min(space.eta_floor())
    return space, likelihood, CampaignPosterior(space, likelihood)


def fit_curves(curves, *, species, free, model=None, priors=None, resonance=None, systematics=None,
               fixed=None, tie=None, walkers=32, steps=2000, burn=None, thin=1, seed=None, backend=None,
               pool=None, progress=None, heating=True, recombination_heating_nK=0.0, inner_steps=1,
               field_noise_nodes=7, rtol=None, initial=None, checkpoint_every=100, log_every=None,
               metadata=None, density_sigma=None, max_steps=None):
    """Global posterior of Efimov parameters from raw decay curves (module docstring).

    Parameters
    ----------
    curves : sequence of DecayCurve
        Atom curves (L3) and dimer curves (beta), any fields, temperatures and traps.
    species : str or Species
    free : sequence of str
        Efimov parameters to sample, as in :func:`lossfit.fit` (``eta`` for a shared
        inelasticity); systematics are added through ``systematics``.
    model : str or EnergyModel, optional
        Energy-resolved model (default: the library default).
    priors : dict, optional
        Priors of the Efimov parameters (as in :func:`lossfit.fit`); defaults are
        log-uniform over the |a| range of the curves.
    resonance : FeshbachResonance, optional
        Nominal a(B); required for curves given by field.
    systematics : dict, optional
        Campaign systematics to sample, name -> Prior or shorthand:
        ``density_scale`` / ``temperature_scale``: a width sigma meaning LogNormal(1, sigma);
        ``b0``, ``width``, ``a_bg``: a width meaning Normal(nominal, width) (G, G, a0);
        ``resonance``: ``True`` (the resonance's own ``covariance``, e.g. from
        :func:`lossfit.experiment.feshbach.calibrate_from_binding_energies`) or a 3x3 covariance of
        (b0, width, a_bg) -- the three sampled with one correlated Normal prior;
        ``sigma_B``: a (lo, hi) range in G meaning LogUniform.
    fixed : dict, optional
        Fixed Efimov parameters, and fixed systematics (e.g. ``{"sigma_B": 0.005}``).
    tie : {None, "universal"}
    walkers, steps, burn, thin, seed, backend, pool, progress, initial, checkpoint_every,
    log_every, metadata, max_steps
        As in :func:`lossfit.fit` (``steps="auto"`` samples until converged, at most
        ``max_steps``).
    heating : bool
        Anti-evaporation and recombination heating in the rate equations.
    recombination_heating_nK : float or array
        T_h in nK, common or one per curve.
    inner_steps : int
        Chord Gauss-Newton steps of the per-curve nuisances per likelihood call.
    field_noise_nodes : int
        Gauss-Hermite nodes of the field-noise average.
    rtol : float, optional
        None: the model's fast thermal averages; a number: the adaptive reference
        quadrature at this tolerance (slow; for checks).
    density_sigma : float, optional
        As in :func:`lossfit.fit`: with ``"density_scale"`` in ``free``, the width of its
        log-normal prior (equivalent to ``systematics={"density_scale": density_sigma}``).

    Returns
    -------
    FitResult
        Its ``likelihood`` is a :class:`CurvesLikelihood` (``.spectra``: the two-stage
        spectra grouped by temperature, for the spectrum plot).
    """
    check_run_settings(walkers, steps, burn, thin, seed)
    space, likelihood, posterior = prepare_curves(
        curves, species=species, free=free, model=model, priors=priors, resonance=resonance,
        systematics=systematics, fixed=fixed, tie=tie, heating=heating,
        recombination_heating_nK=recombination_heating_nK, inner_steps=inner_steps,
        field_noise_nodes=field_noise_nodes, rtol=rtol, density_sigma=density_sigma)
    if walkers < 2 * space.ndim:
        raise LossfitValueError("walkers", f"must be at least twice the number of sampled parameters "
                                f"({2 * space.ndim}), got {walkers}")
    mdl = likelihood.model
    rng = np.random.default_rng(seed)

    store, done = open_backend(backend, walkers, space.ndim, every=checkpoint_every, names=space.names,
                               metadata=metadata)
    if done == 0:
        centre = _find_centre(posterior, space, likelihood, rng, initial)
        p0 = _ball(posterior, space, walkers, rng, centre)
    else:
        centre = store.get_last_sample().coords[int(np.argmax(store.get_last_sample().log_prob))]
        vals = space.values(centre)
        likelihood.refresh(space.efimov(vals), vals)
        p0 = np.zeros((walkers, space.ndim))
    show = interactive() if progress is None else bool(progress)
    # the whole half-ensemble per call (every walker's curves in one batched integration),
    # split into one block per worker of the pool
    run = sample(WalkerBlocks(posterior, pool), p0, steps, backend=store, pool=None, vectorize=True,
                 seed=int(rng.integers(2 ** 31)), progress=show, log_every=log_every,
                 checkpoint_every=checkpoint_every, names=space.names, metadata=metadata, max_steps=max_steps)
    settings = {"walkers": walkers, "steps": int(run.chain.shape[0]), "seed": seed, "model": mdl.name,
                "free": ",".join(space.names), "tie": tie or "", "curves": likelihood.n_curves,
                "inner_steps": inner_steps, "route": "global fit of decay curves",
                "dimers": _dimer_record(likelihood), **stop_record(run)}
    return make_result(space, likelihood, run.chain, run.log_prob, run.acceptance, burn=burn, thin=thin,
                       settings=settings)


def _dimer_record(likelihood):
    """How the forward model treated shallow dimers (recorded in the result's settings)."""
    n = int(likelihood.explicit.sum())
    if n == 0:
        return "no atom curve at a > 0 with a channel-resolving model: effective L3 only"
    depths = [d for d, e in zip(likelihood.trap_depths, likelihood.explicit) if e]
    assumed = sum(d.startswith("assumed") for d in depths)
    return (f"explicit trapped-dimer kinetics for {n} atom curve(s) at a > 0; trap depth given for "
            f"{n - assumed}, assumed {DEFAULT_DEPTH_OVER_T:g} k_B T0 for {assumed} (CurvesLikelihood.trap_depths)")


def _find_centre(posterior, space, likelihood, rng, initial, draws=48):
    """Posterior mode: best prior draw, Nelder-Mead, refresh the nuisance reference there, polish."""
    if initial is not None:
        missing = [n for n in space.names if n not in initial]
        if missing:
            raise LossfitValueError("initial", f"needs values for {missing}")
        theta = space.theta([initial[n] for n in space.names])
    else:
        pri = np.column_stack([p.sample(rng, draws) for p in space.priors])
        thetas = space.theta(pri)
        lps = posterior.batch(thetas)            # one walker-set call for every draw
        if not np.isfinite(lps).any():
            raise LossfitValueError("priors", "no prior draw gives a finite posterior; check data and priors")
        theta = thetas[int(np.argmax(lps))]

    def objective(t):
        lp = posterior(t)
        return -lp if np.isfinite(lp) else 1e300

    for _ in range(2):
        # simplex edges of 30 x the walker ball: 3 % in ln|value|, less for tight priors
        simplex = theta + np.vstack([np.zeros(space.ndim), np.diag(30.0 * _scales(space))])
        res = minimize(objective, theta, method="Nelder-Mead",
                       options={"maxiter": 150 * space.ndim, "xatol": 1e-5, "fatol": 1e-3,
                                "initial_simplex": simplex})
        theta = res.x
        vals = space.values(theta)
        likelihood.refresh(space.efimov(vals), vals)
    return theta


def _scales(space):
    """Per-coordinate start scale in theta: 1e-3, at most a tenth of a Normal prior's
    relative width (a resonance known to 5 mG at 550 G has width 1e-5 in ln b0)."""
    scale = np.full(space.ndim, 1e-3)
    for i, p in enumerate(space.priors):
        if isinstance(p, Normal):
            scale[i] = min(scale[i], 0.1 * p.sigma / abs(p.mu))
    return scale


def _ball(posterior, space, walkers, rng, centre):
    """Walkers in a small ball around the mode, each coordinate scaled by :func:`_scales`."""
    return walker_ball(posterior, centre, walkers, rng, _scales(space))

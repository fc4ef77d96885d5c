"""``lossfit.fit``: posterior Efimov parameters from loss spectra with emcee."""

__all__ = ["fit", "prepare", "EXCLUDE_CHOICES"]

import math

import numpy as np
from scipy.optimize import minimize

from ..data.curves import DecayCurve
from ..data.spectra import LossSpectrum
from ..errors import LossfitValueError
from ..mixture import HeteronuclearSystem
from ..universal.mixture_model import resolve_model, resolve_species
from .global_fit import fit_curves
from .likelihood import SpectrumLikelihood
from .parameters import ParameterSpace, default_priors
from .posterior import Posterior, WalkerBlocks, check_run_settings, coerce_priors, interactive, make_result, walker_ball
from .priors import LogUniform
from .result import RANGE_REASONS, validity_findings
from .sampling import open_backend, sample, stop_record

#: Values of ``exclude`` (:func:`fit`): None keeps every point; ``"outside-validity"``
#: leaves out the points outside the zero-range theory's range (|a| < 5 r_vdW or
#: k_B T > 0.1 E_vdW, :data:`lossfit.inference.result.RANGE_REASONS`).
EXCLUDE_CHOICES = (None, "outside-validity")


def _check_constrained(space, spectra):
    has = {"l3-": any((s.kind == "l3") & (s.a < 0).any() for s in spectra),
           "l3+": any((s.kind == "l3") & (s.a > 0).any() for s in spectra),
           "beta": any(s.kind == "beta" for s in spectra)}
    needs = {"a_minus": "l3-", "eta_minus": "l3-", "a_plus": "l3+", "eta_plus": "l3+",
             "a_star": "beta", "eta_star": "beta"}
    if space.tie == "universal":
        return
    for name in space.names:
        if name in needs and not has[needs[name]]:
            what = {"l3-": "L3 data at a < 0", "l3+": "L3 data at a > 0", "beta": "beta data"}[needs[name]]
            raise LossfitValueError("free", f"{name} is free but there is no {what} to constrain it")


def _exclude(spectra, species, exclude):
    """(spectra to fit, records of the points left out) for ``exclude`` (:func:`fit`)."""
    if exclude not in EXCLUDE_CHOICES:
        raise LossfitValueError("exclude", f"must be None (keep every point) or 'outside-validity', got {exclude!r}")
    if exclude is None:
        return spectra, []
    # the findings fit results report, so that exactly the points flagged there are dropped
    outside = [f for f in validity_findings(spectra, species) if f["outside_range"]]
    if not outside:
        return spectra, []
    range_texts = {text for _, text in RANGE_REASONS}
    drop = [np.zeros(len(s), dtype=bool) for s in spectra]
    records = []
    for f in outside:
        s, j = spectra[f["spectrum"]], f["point"]
        drop[f["spectrum"]][j] = True
        records.append({"spectrum": f["spectrum"], "label": s.label, "kind": s.kind, "point": j, "a": f["a"],
                        "temperature_nK": f["temperature_nK"], "value": float(s.value[j]),
                        "error": float(s.error[j]), "reasons": [r for r in f["reasons"] if r in range_texts]})
    kept = [s.select(~d) for s, d in zip(spectra, drop) if not d.all()]
    if not kept:
        raise LossfitValueError("exclude", f"exclude={exclude!r} leaves no data point: all {len(records)} lie "
                                "outside the validity range (|a| < 5 r_vdW or k_B T > 0.1 E_vdW); fit with "
                                "exclude=None to keep them")
    return kept, records


def _negative_finite(posterior):
    # Nelder-Mead needs finite values: outside the prior support return a huge one.
    def objective(theta):
        lp = posterior(theta)
        return -lp if np.isfinite(lp) else 1e300
    return objective


def _start(posterior, space, walkers, rng, initial):
    ndim = space.ndim
    if initial is not None:
        centre = space.theta([initial[n] for n in space.names])
        if not np.isfinite(posterior(centre)):
            raise LossfitValueError("initial", f"has zero posterior density: {initial}")
    else:
        draws = np.column_stack([p.sample(rng, 256) for p in space.priors])
        thetas = space.theta(draws)
        lps = posterior.batch(thetas)            # one walker-set call for every draw
        if not np.isfinite(lps).any():
            raise LossfitValueError("priors", "no prior draw gives a finite posterior; check data and priors")
        best = None
        for i in np.argsort(-lps)[:6]:
            res = minimize(_negative_finite(posterior), thetas[i], method="Nelder-Mead",
                           options={"maxiter": 400 * ndim, "xatol": 1e-6, "fatol": 1e-8})
            if best is None or res.fun < best.fun:
                best = res
        centre = best.x
    return walker_ball(posterior, centre, walkers, rng, np.full(ndim, 1e-3))


def prepare(data, *, species, free, model=None, priors=None, fixed=None, tie=None,
            density_sigma=None, rtol=None, exclude=None):
    """Validate a fit's inputs and build its pieces: (space, likelihood, posterior).

    Shared by :func:`fit` and by code that rebuilds results from stored chains. Points
    left out by ``exclude`` are gone before the default priors and the likelihood are
    built; the likelihood keeps their records as ``excluded``.
    """
    spectra = [data] if isinstance(data, LossSpectrum) else list(data)
    if not spectra or not all(isinstance(s, LossSpectrum) for s in spectra):
        raise LossfitValueError("data", "must be one or more LossSpectrum objects")
    sp = resolve_species(species)
    spectra, excluded = _exclude(spectra, sp, exclude)
    mdl = resolve_model(model, sp)
    # two bosons and a third atom: Efimov features repeat every `scaling` in |a| within a
    # fit's range, so a_- is sampled over one period (docs/heteronuclear-rates.md)
    period = sp.scaling if isinstance(sp, HeteronuclearSystem) else None
    if period is not None and tie == "universal":
        # the tie's relations (a*/a_-, a_+/a_-) are those of three identical bosons
        raise LossfitValueError("tie", f"'universal' ties a* and a_+ to a_- by the relations of three identical "
                                f"bosons, not those of {sp.label}: fit a_star and a_minus as separate parameters")
    free = [free] if isinstance(free, str) else list(free)
    if "density_scale" in free and density_sigma is not None:
        if not (isinstance(density_sigma, (int, float)) and math.isfinite(density_sigma) and density_sigma > 0):
            raise LossfitValueError("density_sigma", f"must be a positive number, got {density_sigma!r}")
    user_priors = coerce_priors(priors)
    try:
        all_priors = default_priors([n for n in free if n not in user_priors], spectra, density_sigma,
                                    period=period)
        _clip_to_model(all_priors, mdl)
        all_priors.update(user_priors)
        space = ParameterSpace(free, all_priors, fixed=fixed, tie=tie)
        _check_constrained(space, spectra)
    except LossfitValueError as err:
        # a free parameter whose data were all left out: say so in terms of the exclusion
        if not excluded or err.argument != "free":
            raise
        raise LossfitValueError("exclude", f"{str(err).split(': ', 1)[1]} once exclude={exclude!r} has left out "
                                f"{len(excluded)} point(s) outside the validity range") from None
    likelihood = SpectrumLikelihood(spectra, sp, mdl, rtol=rtol, eta_min=space.eta_floor())
    likelihood.excluded = excluded
    return space, likelihood, Posterior(space, likelihood)


def _clip_to_model(priors, model):
    """A default a_- prior cut to the a_- the model accepts (a mixture with a_bb != 0 has its
    kappa* a_- tabulated for a range of a_bb/a_-, docs/heteronuclear-rates.md)."""
    limits = model.a_minus_range() if hasattr(model, "a_minus_range") else None
    prior = priors.get("a_minus")
    if limits is None or not isinstance(prior, LogUniform):
        return
    lo, hi = max(prior.lo, abs(limits[0])), min(prior.hi, abs(limits[1]))
    if not lo < hi:
        raise LossfitValueError("priors", f"the default a_minus window ({-prior.lo:g}, {-prior.hi:g}) a0 lies "
                                f"outside the a_- the table covers for this a_bb ({limits[0]:g}, {limits[1]:g}) a0")
    priors["a_minus"] = LogUniform(-lo, -hi)


def fit(data, *, species, free, model=None, priors=None, walkers=32, steps=3000, burn=None, thin=1,
        seed=None, backend=None, pool=None, fixed=None, tie=None, density_sigma=None,
        progress=None, initial=None, rtol=None, checkpoint_every=100, log_every=None, metadata=None,
        max_steps=None, exclude=None, **curve_options):
    """Sample the posterior of Efimov parameters given loss spectra.

    Parameters
    ----------
    data : LossSpectrum, DecayCurve, or a sequence of either
        Any mix of L3 (either side, any temperatures) and beta spectra; or raw decay
        curves, which are fitted globally by
        :func:`lossfit.inference.global_fit.fit_curves` (its extra options, such as
        ``resonance`` and ``systematics``, pass through ``**curve_options``).
    species : Species or str
    free : sequence of str
        Parameters to sample: any of ``a_minus, eta_minus, a_star, eta_star, a_plus,
        eta_plus``, or ``eta`` (one shared inelasticity), plus ``density_scale``.
    model : str or EnergyModel, optional
        Energy-resolved model averaged over the thermal distribution (default: the
        library default, see ``lossfit.available_models()``).
    priors : dict, optional
        name -> Prior (or a (lo, hi) pair meaning LogUniform, in physical units: a0 for
        lengths). Defaults: log-uniform over the measured |a| range on the relevant
        side, eta log-uniform in [0.005, 2], density scale log-normal of ``density_sigma``.
    walkers : int
        Ensemble size (>= 2 x number of free parameters).
    steps : int or "auto"
        Number of steps; ``"auto"`` samples until the chain after burn-in is at least 50
        autocorrelation times long and the estimate changed by less than 1 % over the
        last 100 steps (emcee's documented rule), at most ``max_steps``; the result
        records why sampling stopped (``settings["stopped"]``).
    max_steps : int, optional
        Cap of ``steps="auto"`` (default 50000).
    burn : int, optional
        Steps discarded; default max(3 tau_max, steps/5), at most steps/2.
    thin : int
        Keep every ``thin``-th step after burn-in.
    seed : int, optional
        Seed of the start-point search and of emcee's random state (reproducible runs).
    backend : str, path or emcee Backend, optional
        HDF5 file for the chain; an existing file with the same shape is resumed.
    pool : object with ``map``, optional
        Evaluates walkers' posteriors in parallel (multiprocessing, MPI, ...).
    fixed : dict, optional
        Values of Efimov parameters that are not sampled.
    tie : {None, "universal"}
        ``"universal"``: sample only a_minus and eta; a* and a_+ follow zero-range theory.
    density_sigma : float, optional
        Width of the log-normal prior of ``density_scale`` (e.g. 0.2 for 20 %).
    progress : bool, optional
        tqdm progress bar; default on in a terminal or notebook.
    initial : dict, optional
        Start point (physical units) instead of the automatic search.
    rtol : float, optional
        None (default): the model's fast thermal averages. A number: the adaptive
        reference quadrature at this tolerance at every likelihood call (slow; for checks).
    checkpoint_every : int
        Steps between checkpoints when ``backend`` is a file.
    log_every : int, optional
        Print a progress line every so many steps (batch jobs without a terminal).
    metadata : dict, optional
        Provenance stored in the chain file.
    exclude : {None, "outside-validity"}
        None (default): fit every point. ``"outside-validity"``: leave out the points
        outside the zero-range theory's range (|a| < 5 r_vdW or k_B T > 0.1 E_vdW; the
        points fit results otherwise list in ``outside_validity`` with
        ``outside_range``) before the priors and the likelihood are built; the result
        lists them in ``excluded`` (and ``summary.json``). An error if no point would
        remain. Spectra only.

    Returns
    -------
    FitResult
    """
    items = [data] if isinstance(data, (LossSpectrum, DecayCurve)) else list(data)
    if items and all(isinstance(d, DecayCurve) for d in items):
        if exclude is not None:
            raise LossfitValueError("exclude", "applies to spectra; a decay-curve fit uses whole curves (pass only "
                                    "the curves to fit)")
        return fit_curves(items, species=species, free=free, model=model, priors=priors, walkers=walkers,
                          steps=steps, burn=burn, thin=thin, seed=seed, backend=backend, pool=pool,
                          fixed=fixed, tie=tie, density_sigma=density_sigma, progress=progress,
                          initial=initial, rtol=rtol, checkpoint_every=checkpoint_every,
                          log_every=log_every, metadata=metadata, max_steps=max_steps, **curve_options)
    if curve_options:
        raise LossfitValueError(sorted(curve_options)[0], "is an option of decay-curve fits only")
    if any(isinstance(d, DecayCurve) for d in items):
        raise LossfitValueError("data", "mixes decay curves and spectra; fit one kind at a time")
    check_run_settings(walkers, steps, burn, thin, seed)
    n_free = 1 if isinstance(free, str) else len(list(free))
    if walkers < 2 * n_free:
        raise LossfitValueError("walkers", f"must be at least twice the number of free parameters "
                                f"({2 * n_free}), got {walkers}")
    space, likelihood, posterior = prepare(data, species=species, free=free, model=model, priors=priors,
                                           fixed=fixed, tie=tie, density_sigma=density_sigma, rtol=rtol,
                                           exclude=exclude)
    rng = np.random.default_rng(seed)
    probe = space.theta([p.sample(rng, 1)[0] for p in space.priors])
    try:
        likelihood(space.efimov(space.values(probe)))
    except LossfitValueError as err:
        if err.argument != "efimov":
            # a refusal about the data themselves (e.g. temperatures beyond a table): as it is
            raise
        raise LossfitValueError("fixed", f"the data need a parameter that is neither free nor fixed: {err}") from None

    store, done = open_backend(backend, walkers, space.ndim, every=checkpoint_every,
                               names=space.names, metadata=metadata)
    show = interactive() if progress is None else bool(progress)
    p0 = _start(posterior, space, walkers, rng, initial) if done == 0 else np.zeros((walkers, space.ndim))
    # the whole half-ensemble per call, split into one block per worker of the pool
    run = sample(WalkerBlocks(posterior, pool), p0, steps, backend=store, pool=None, vectorize=True,
                 seed=int(rng.integers(2 ** 31)), progress=show, log_every=log_every,
                 checkpoint_every=checkpoint_every, names=space.names, metadata=metadata, max_steps=max_steps)
    settings = {"walkers": walkers, "steps": int(run.chain.shape[0]), "seed": seed,
                "model": likelihood.model.name, "free": ",".join(space.names), "tie": tie or "",
                "density_sigma": density_sigma, "exclude": exclude or "", **stop_record(run)}
    return make_result(space, likelihood, run.chain, run.log_prob, run.acceptance, burn=burn, thin=thin,
                       settings=settings)

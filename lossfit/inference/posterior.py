"""What the spectrum fit and the global curve fit share: the log posterior, prior
shorthands, the walker ball around a start point, the default burn-in and the result."""

__all__ = ["check_run_settings", "Posterior", "WalkerBlocks", "coerce_priors", "interactive", "walker_ball",
           "auto_burn", "make_result"]

import math
import sys

import numpy as np

from ..errors import LossfitValueError
from .diagnostics import autocorrelation_times
from .priors import LogUniform, Prior
from .result import FitResult


class Posterior:
    """log posterior in sampling coordinates; picklable, so any pool can map it.

    :meth:`batch` evaluates a whole walker set (W, ndim) in one call, down to the numba
    kernels where the likelihood is ``vectorized`` (walker by walker otherwise); a single
    point is a batch of one, so both give the same bits and the same chains.
    """

    def __init__(self, space, likelihood):
        self.space = space
        self.likelihood = likelihood

    def __call__(self, theta):
        return float(self.batch(np.asarray(theta, dtype=float)[None, :])[0])

    def batch(self, thetas, log_likelihood=None):
        """log posterior of every row of ``thetas`` (W, ndim): an array of W.

        ``log_likelihood`` (optional) replaces the likelihood's own evaluation: a callable
        taking the rows with a finite prior and returning their log L (the two-level
        evaluation of :class:`WalkerBlocks`)."""
        thetas = np.asarray(thetas, dtype=float)
        out = np.full(thetas.shape[0], -math.inf)
        lp = self.space.log_prior(thetas)
        ok = np.flatnonzero(np.isfinite(lp))
        if ok.size == 0:
            return out
        if log_likelihood is not None:
            ll = np.asarray(log_likelihood(thetas[ok]), dtype=float)
        elif getattr(self.likelihood, "vectorized", False):
            values = self.space.values(thetas[ok])
            ll = np.asarray(self.likelihood.given_values(self.space.efimov(values), values), dtype=float)
        else:
            ll = np.array([self._one(thetas[i]) for i in ok])
        total = lp[ok] + ll
        total[~np.isfinite(total)] = -math.inf
        out[ok] = total
        return out

    def _one(self, theta):
        values = self.space.values(theta)
        return self.likelihood.given_values(self.space.efimov(values), values)


class WalkerBlocks:
    """emcee's vectorised log probability: the walker set in one :meth:`Posterior.batch`
    call, or split into one block per worker of ``pool`` (blocks, not single walkers,
    cross the process or MPI boundary).

    Two-level parallelism: when the pool has more workers than the set has walkers
    (emcee hands out half the ensemble per call) and the likelihood can be cut into
    groups of curves (:meth:`lossfit.inference.curves_likelihood.CurvesLikelihood.split`),
    the curves are split as well (:meth:`curve_groups`), every walker's chi2 of every
    group evaluated as one task, the groups' chi2 put side by side and summed here. The
    log posteriors, and so the chains, are bit for bit those of one process.
    """

    def __init__(self, posterior, pool=None):
        self.posterior = posterior
        self.pool = pool
        self._batch = posterior.batch          # one bound method: the pool sends it once
        size = getattr(pool, "size", None) or getattr(pool, "_processes", None)
        self.blocks = int(size) if size else (2 if pool is not None else 1)
        self._groups, self._group_tasks = {}, {}

    def curve_groups(self, walkers):
        """Number of curve groups a set of ``walkers`` is evaluated in (1: no split)."""
        likelihood = getattr(self.posterior, "likelihood", None)
        if self.pool is None or walkers < 1 or self.blocks <= walkers or not hasattr(likelihood, "split"):
            return 1
        # each worker gets ceil(walkers x groups / workers) tasks of 1/groups of the curves:
        # the fewest groups that make the busiest worker's share smallest (64 workers and 32
        # walkers: 2 groups; 48 workers: 3 groups, two tasks each, 2/3 of a walker's curves)
        if walkers not in self._groups:
            workers = self.blocks
            self._groups[walkers] = min(range(1, min(workers, likelihood.n_curves) + 1),
                                        key=lambda g: (math.ceil(walkers * g / workers) / g, g))
        return self._groups[walkers]

    def __call__(self, coords):
        if self.pool is None or self.blocks == 1:
            return self.posterior.batch(coords)
        groups = self.curve_groups(len(coords))
        if groups > 1:
            return self.posterior.batch(coords, log_likelihood=self._in_groups(groups, len(coords)))
        parts = [p for p in np.array_split(coords, self.blocks) if len(p)]
        return np.concatenate(list(self.pool.map(self._batch, parts)))

    def _in_groups(self, groups, walkers):
        if groups not in self._group_tasks:
            # one task object per split: the pool sends the curve groups once
            self._group_tasks[groups] = _CurveGroupTask(self.posterior.space,
                                                        self.posterior.likelihood.split(groups))
        task = self._group_tasks[groups]

        def log_likelihood(thetas):
            parts = [p for p in np.array_split(thetas, min(walkers, len(thetas))) if len(p)]
            chi2 = self.pool.map(task, [(g, p) for p in parts for g in range(groups)])
            rows = [np.concatenate(chi2[i:i + groups], axis=1) for i in range(0, len(chi2), groups)]
            return self.posterior.likelihood.log_likelihood_of(np.concatenate(rows))
        return log_likelihood


class _CurveGroupTask:
    """One task of the two-level split: (group, walker rows) -> chi2 of the group's curves
    for every row, shape (rows, curves of the group)."""

    def __init__(self, space, likelihoods):
        self.space = space
        self.likelihoods = likelihoods

    def __call__(self, item):
        group, thetas = item
        values = self.space.values(thetas)
        return self.likelihoods[group].curve_chi2(self.space.efimov(values), values)


def interactive():
    """True in a notebook or a terminal (progress bars on), False in batch jobs."""
    try:
        from IPython import get_ipython  # optional: present only in notebooks and IPython
        if get_ipython() is not None:
            return True
    except ImportError:
        pass
    return sys.stderr.isatty()


def coerce_priors(priors):
    """name -> Prior from a dict of Priors or (lo, hi) pairs meaning LogUniform."""
    out = {}
    for name, p in (priors or {}).items():
        if isinstance(p, Prior):
            out[name] = p
        elif isinstance(p, (tuple, list)) and len(p) == 2:
            out[name] = LogUniform(*p)
        else:
            raise LossfitValueError(f"priors[{name!r}]", f"must be a Prior or a (lo, hi) pair, got {p!r}")
    return out


def walker_ball(posterior, centre, walkers, rng, scale):
    """Walkers in a small Gaussian ball of per-coordinate ``scale`` around ``centre``
    (sampling coordinates), each redrawn until its posterior is finite; raises if a
    walker finds no finite point (a start on the edge of the support)."""
    ndim = centre.size
    p0 = np.empty((walkers, ndim))
    for w in range(walkers):
        for _ in range(1000):
            trial = centre + scale * rng.standard_normal(ndim)
            if np.isfinite(posterior(trial)):
                break
        else:
            raise LossfitValueError("initial", "no finite posterior near the start point")
        p0[w] = trial
    return p0


def auto_burn(chain):
    """Default burn-in: max(3 tau_max, steps/5), at most steps/2."""
    tau = autocorrelation_times(chain)
    # a very short chain can give no finite tau at all: fall back on steps/5
    tau_max = float(np.max(tau[np.isfinite(tau)])) if np.isfinite(tau).any() else 0.0
    return int(min(max(3 * tau_max, chain.shape[0] / 5), chain.shape[0] / 2))


def _is_int(value):
    return isinstance(value, (int, np.integer)) and not isinstance(value, (bool, np.bool_))


def check_run_settings(walkers, steps, burn=None, thin=1, seed=None):
    """Validate a sampler run's settings before any work is done: integers (not booleans),
    walkers >= 2, steps >= 2, thin >= 1, burn (if given) in [0, steps - 2], seed None or a
    non-negative integer. A burn-in as long as the chain is caught here, not after it ran."""
    auto = isinstance(steps, str) and steps == "auto"
    for name, value, lo in (("walkers", walkers, 2), ("steps", 2 if auto else steps, 2), ("thin", thin, 1)):
        if not _is_int(value) or value < lo:
            more = " or 'auto'" if name == "steps" else ""
            raise LossfitValueError(name, f"must be an integer >= {lo}{more}, got {value!r}")
    if auto:
        if burn is not None and (not _is_int(burn) or burn < 0):
            raise LossfitValueError("burn", f"must be a non-negative integer, got {burn!r}")
    elif burn is not None and (not _is_int(burn) or not 0 <= burn <= steps - 2):
        raise LossfitValueError("burn", f"must be an integer in [0, steps - 2] = [0, {steps - 2}], got {burn!r}")
    if seed is not None and (not _is_int(seed) or seed < 0):
        raise LossfitValueError("seed", f"must be None or a non-negative integer, got {seed!r}")


def make_result(space, likelihood, chain, log_prob, acceptance, *, burn=None, thin=1, settings=None):
    """A :class:`FitResult` from a chain (steps, walkers, ndim) in sampling coordinates."""
    if burn is None:
        burn = auto_burn(chain)
    elif not isinstance(burn, (int, np.integer)) or not (0 <= burn < chain.shape[0] - 1):
        raise LossfitValueError("burn", f"must be an integer in [0, {chain.shape[0] - 2}], got {burn!r}")
    return FitResult(space=space, chain=chain, log_prob=log_prob, acceptance=acceptance, burn=burn,
                     thin=thin, likelihood=likelihood, species=likelihood.species,
                     model=likelihood.model, settings=settings or {})

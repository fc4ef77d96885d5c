"""Convergence diagnostics of ensemble chains.

* integrated autocorrelation time: :func:`emcee.autocorr.integrated_time`
  (Goodman & Weare 2010; Foreman-Mackey et al., PASP 125, 306 (2013)), estimated from
  the walker-averaged autocorrelation function with Sokal's automatic window c = 5;
* effective sample size: walkers x steps / tau;
* split-R̂ (Gelman et al., Bayesian Data Analysis, 3rd ed. (2013), sec. 11.4), each
  walker treated as a chain and split in halves. Walkers of an affine-invariant
  ensemble are not independent chains, so R̂ is a complementary check, not a proof.
* rule of thumb for chain length: at least 50 tau after burn-in (emcee documentation,
  "Autocorrelation analysis"; common practice).
"""

__all__ = ["autocorrelation_times", "split_rhat", "MIN_STEPS_PER_TAU"]

import emcee
import numpy as np

MIN_STEPS_PER_TAU = 50


def autocorrelation_times(chain):
    """tau per parameter for a chain of shape (steps, walkers, ndim), in steps."""
    return np.atleast_1d(emcee.autocorr.integrated_time(chain, c=5, tol=0, quiet=True))


def split_rhat(chain):
    """Split-R̂ per parameter for a chain of shape (steps, walkers, ndim)."""
    steps = chain.shape[0] // 2
    if steps < 2:
        return np.full(chain.shape[2], np.nan)
    halves = np.concatenate([chain[:steps], chain[steps:2 * steps]], axis=1)   # (n, 2W, ndim)
    n = halves.shape[0]
    chain_means = halves.mean(axis=0)
    chain_vars = halves.var(axis=0, ddof=1)
    w = chain_vars.mean(axis=0)
    b = n * chain_means.var(axis=0, ddof=1)
    var_plus = (n - 1) / n * w + b / n
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.sqrt(var_plus / w)

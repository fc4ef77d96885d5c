"""Running emcee: backends (memory or HDF5 with resume), pools, seeding, progress.

The sampler is pool-agnostic, as emcee is: any object with a ``map`` method
(``multiprocessing.Pool``, an MPI pool, ...) evaluates the walkers' log posteriors.
"""

__all__ = ["sample", "open_backend", "ChainRun"]

import os
from dataclasses import dataclass

import emcee
import numpy as np

from ..errors import LossfitValueError


@dataclass
class ChainRun:
    """Raw output of :func:`sample`: chain (steps, walkers, ndim), log_prob, acceptance."""

    chain: np.ndarray
    log_prob: np.ndarray
    acceptance: np.ndarray
    resumed_from: int


def open_backend(backend, walkers, ndim):
    """Resolve ``backend`` to (emcee backend, steps already stored).

    ``None``: in memory. A path: an HDF5 file (group ``mcmc``); an existing file with
    chains of the same shape is resumed, one of another shape or an unreadable file is
    an error naming ``backend``. An emcee backend instance is used as given.
    """
    if backend is None:
        return emcee.backends.Backend(), 0
    if isinstance(backend, emcee.backends.HDFBackend):
        if not os.path.exists(backend.filename):
            return backend, 0
        return backend, int(backend.iteration)
    if isinstance(backend, emcee.backends.Backend):
        return backend, int(getattr(backend, "iteration", 0) or 0) if backend.initialized else 0
    path = os.fspath(backend)
    store = emcee.backends.HDFBackend(path, name="mcmc")
    if not os.path.exists(path):
        return store, 0
    try:
        done = int(store.iteration)
        shape = tuple(store.shape) if done else None
    except Exception as err:     # truncated, foreign or locked file
        raise LossfitValueError("backend", f"{path!r} cannot be read as a chain file ({err})") from None
    if done and shape != (walkers, ndim):
        raise LossfitValueError("backend", f"{path!r} holds chains of shape {shape}; this run needs "
                                f"{(walkers, ndim)}")
    return store, done


def sample(log_prob, p0, steps, *, backend=None, pool=None, seed=None, progress=False):
    """Run (or resume) an affine-invariant ensemble on ``log_prob``.

    Parameters
    ----------
    log_prob : callable
        theta (1-D array) -> log posterior; must be picklable to use a process pool.
    p0 : ndarray, shape (walkers, ndim)
        Start positions (ignored when the backend already holds steps).
    steps : int
        Total number of steps wanted in the backend.
    backend, pool
        See :func:`open_backend`; any object with ``map``.
    seed : int, optional
        Seeds emcee's random state (reproducible proposals).
    progress : bool
        tqdm progress bar.

    Returns
    -------
    ChainRun
    """
    p0 = np.asarray(p0, dtype=float)
    walkers, ndim = p0.shape
    store, done = open_backend(backend, walkers, ndim)
    sampler = emcee.EnsembleSampler(walkers, ndim, log_prob, pool=pool, backend=store)
    if done == 0:
        store.reset(walkers, ndim)
        sampler.random_state = np.random.RandomState(seed).get_state()
        sampler.run_mcmc(p0, steps, progress=progress)
    elif done < steps:
        sampler.run_mcmc(None, steps - done, progress=progress)
    return ChainRun(chain=sampler.get_chain(), log_prob=sampler.get_log_prob(),
                    acceptance=np.asarray(sampler.acceptance_fraction), resumed_from=done)

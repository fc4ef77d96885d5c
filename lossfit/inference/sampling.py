"""Running emcee: backends (memory or checkpointed HDF5 with resume), pools, seeding,
progress bars or batch log lines, and clean stops on SIGTERM/SIGINT.

The sampler is pool-agnostic, as emcee is: any object with a ``map`` method
(``multiprocessing.Pool``, :class:`lossfit.inference.pools.MPIPool`, ...) evaluates
the walkers' log posteriors.
"""

__all__ = ["sample", "open_backend", "ChainRun", "Interrupted"]

import os
import signal
import sys
import threading
import time
from dataclasses import dataclass

import emcee
import numpy as np

from ..errors import LossfitError, LossfitValueError
from .backends import CheckpointBackend


class Interrupted(LossfitError):
    """Sampling stopped on a signal after the chain was checkpointed (resumable)."""

    def __init__(self, signum, iteration, saved=True):
        self.signum = signum
        self.iteration = iteration
        if saved:
            text = f"stopped by signal {signum} at step {iteration}; the chain is saved and the run resumes from there"
        else:
            text = f"stopped by signal {signum} before sampling began; nothing was saved"
        super().__init__(text)


@dataclass
class ChainRun:
    """Raw output of :func:`sample`: chain (steps, walkers, ndim), log_prob, acceptance."""

    chain: np.ndarray
    log_prob: np.ndarray
    acceptance: np.ndarray
    resumed_from: int


def open_backend(backend, walkers, ndim, *, every=100, names=None, metadata=None):
    """Resolve ``backend`` to (emcee backend, steps already stored).

    ``None``: in memory. A path: a :class:`CheckpointBackend` file; an existing file
    with chains of the same shape is resumed, one of another shape or a damaged file is
    an error naming ``backend``. An emcee backend instance is used as given.
    """
    if backend is None:
        return emcee.backends.Backend(), 0
    if isinstance(backend, emcee.backends.HDFBackend):
        if not os.path.exists(backend.filename):
            return backend, 0
        return backend, int(backend.iteration)
    if isinstance(backend, emcee.backends.Backend):
        done = int(backend.iteration) if backend.initialized else 0
    else:
        backend = CheckpointBackend(backend, every=every, names=names, metadata=metadata)
        done = int(backend.iteration) if backend.initialized else 0
    stored_names = getattr(backend, "stored_names", None)
    if done and names and stored_names and list(stored_names) != list(names):
        raise LossfitValueError("backend", f"stored chains are for parameters {stored_names}; this run "
                                f"samples {list(names)}")
    if done and tuple(backend.shape) != (walkers, ndim):
        raise LossfitValueError("backend", f"stored chains have shape {tuple(backend.shape)}; this run "
                                f"needs (walkers, ndim) = {(walkers, ndim)}")
    return backend, done


class _SignalGuard:
    """Turn SIGTERM/SIGINT into a flag checked between steps (main thread only)."""

    def __init__(self):
        self.signum = None
        self._old = {}

    def _handler(self, signum, frame):
        self.signum = signum

    def __enter__(self):
        if threading.current_thread() is threading.main_thread():
            for s in (signal.SIGTERM, signal.SIGINT):
                self._old[s] = signal.signal(s, self._handler)
        return self

    def __exit__(self, *exc):
        for s, h in self._old.items():
            signal.signal(s, h)
        return False


def _log_line(stream, i, total, sampler, start_time, start_step):
    done = i - start_step
    rate = done / max(time.perf_counter() - start_time, 1e-9)
    eta = (total - i) / rate if rate > 0 else float("nan")
    acc = float(np.mean(sampler.acceptance_fraction))
    try:
        tau = float(np.max(sampler.get_autocorr_time(tol=0, quiet=True)))
    except Exception:          # too few steps for an estimate
        tau = float("nan")
    print(f"[lossfit] step {i}/{total}  acceptance {acc:.3f}  tau~{tau:.1f}  "
          f"{rate:.1f} steps/s  ETA {eta:.0f} s", file=stream, flush=True)


def sample(log_prob, p0, steps, *, backend=None, pool=None, seed=None, progress=False,
           log_every=None, log_stream=None, checkpoint_every=100, names=None, metadata=None):
    """Run (or resume) an affine-invariant ensemble on ``log_prob``.

    Parameters
    ----------
    log_prob : callable
        theta (1-D array) -> log posterior; must be picklable to use a process pool.
    p0 : ndarray, shape (walkers, ndim)
        Start positions (ignored when the backend already holds steps).
    steps : int
        Total number of steps wanted in the backend.
    backend : None, path or emcee backend
        See :func:`open_backend`.
    pool : object with ``map``, optional
    seed : int, optional
        Seeds emcee's random state (reproducible proposals).
    progress : bool
        tqdm progress bar (interactive use).
    log_every : int, optional
        Print a log line (step, acceptance, autocorrelation estimate, ETA) every so many
        steps (batch use without a terminal).
    checkpoint_every : int
        Steps between checkpoints of a file backend.

    Returns
    -------
    ChainRun

    Raises
    ------
    Interrupted
        On SIGTERM or SIGINT, after the chain has been written.
    """
    p0 = np.asarray(p0, dtype=float)
    walkers, ndim = p0.shape
    store, done = open_backend(backend, walkers, ndim, every=checkpoint_every, names=names,
                               metadata=metadata)
    if metadata and isinstance(store, CheckpointBackend):
        store.metadata.update(metadata)
    sampler = emcee.EnsembleSampler(walkers, ndim, log_prob, pool=pool, backend=store)
    if done == 0:
        store.reset(walkers, ndim)
        sampler.random_state = np.random.RandomState(seed).get_state()
        start = p0
    else:
        start = store.get_last_sample()
    stream = log_stream or sys.stderr
    t0 = time.perf_counter()
    with _SignalGuard() as guard:
        if done < steps:
            for _ in sampler.sample(start, iterations=steps - done, progress=progress):
                i = store.iteration
                if log_every and (i % log_every == 0 or i == steps):
                    _log_line(stream, i, steps, sampler, t0, done)
                if guard.signum is not None:
                    break
    if isinstance(store, CheckpointBackend):
        store.flush()
    if guard.signum is not None and store.iteration < steps:
        raise Interrupted(guard.signum, store.iteration)
    return ChainRun(chain=store.get_chain(), log_prob=store.get_log_prob(),
                    acceptance=store.accepted / max(store.iteration, 1), resumed_from=done)

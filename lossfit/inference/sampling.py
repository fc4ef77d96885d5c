"""Running emcee: backends (memory or checkpointed HDF5 with resume), pools, seeding,
progress bars or batch log lines, and clean stops on SIGTERM/SIGINT.

The sampler is pool-agnostic, as emcee is: any object with a ``map`` method
(``multiprocessing.Pool``, :class:`lossfit.inference.pools.MPIPool`, ...) evaluates
the walkers' log posteriors.
"""

__all__ = ["sample", "open_backend", "ChainRun", "Interrupted", "convergence_state", "stop_record", "AUTO_STEPS",
           "DEFAULT_MAX_STEPS", "CHECK_EVERY", "TAU_RTOL"]

import math
import os
import signal
import sys
import threading
import time
from dataclasses import dataclass

import emcee
import numpy as np
from emcee.ensemble import Model, walkers_independent

try:
    # notebook progress widgets where ipywidgets is installed; tqdm.auto would otherwise
    # warn at import in every notebook without it
    import ipywidgets  # noqa: F401
    from tqdm.auto import tqdm
except ImportError:
    from tqdm.std import tqdm

from ..errors import Interrupted, LossfitValueError
from .backends import CheckpointBackend
from .diagnostics import MIN_STEPS_PER_TAU, autocorrelation_times
from .moves import WalkerSetStretchMove

#: ``steps="auto"``: sample until converged (:func:`convergence_state`), at most ``max_steps``.
AUTO_STEPS = "auto"
#: Largest number of steps an automatic run takes when no ``max_steps`` is given.
DEFAULT_MAX_STEPS = 50000
#: Steps between convergence checks of an automatic run (emcee's documentation checks
#: every 100 steps).
CHECK_EVERY = 100
#: Largest relative change of tau between two checks for an automatic run to stop.
TAU_RTOL = 0.01


@dataclass
class ChainRun:
    """Raw output of :func:`sample`: chain (steps, walkers, ndim), log_prob, acceptance,
    the step a resumed run started from, and why sampling stopped (``"fixed length"``,
    ``"converged"`` or ``"max_steps"``) with the tau estimate (steps) at the stop."""

    chain: np.ndarray
    log_prob: np.ndarray
    acceptance: np.ndarray
    resumed_from: int
    stop_reason: str = "fixed length"
    tau: float = float("nan")


def convergence_state(chain, check_every=CHECK_EVERY):
    """Whether a chain (steps, walkers, ndim) is long enough to stop an automatic run.

    The rule of emcee's documentation ("Autocorrelation analysis & convergence"), with
    lossfit's burn-in: the chain after the default burn-in max(3 tau, steps/5) is at
    least 50 tau long (tau the largest integrated autocorrelation time), and tau changed
    by less than 1 % since the chain was ``check_every`` steps shorter. Both estimates
    come from the stored chain, so a resumed run takes the same decisions.

    Returns
    -------
    converged : bool
    tau : float
        The current estimate (steps).
    needed : int
        Chain length the rule asks for at this tau.
    """
    steps = chain.shape[0]
    tau = float(np.max(autocorrelation_times(chain)))
    if not math.isfinite(tau):
        return False, tau, 0
    needed = int(math.ceil(max(MIN_STEPS_PER_TAU * tau / 0.8, (MIN_STEPS_PER_TAU + 3) * tau)))
    if steps < needed or steps <= check_every:
        return False, tau, needed
    before = float(np.max(autocorrelation_times(chain[:steps - check_every])))
    return abs(tau - before) < TAU_RTOL * tau, tau, needed


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


def _log_line(stream, i, total, sampler, start_time, start_step, needed=None):
    done = i - start_step
    rate = done / max(time.perf_counter() - start_time, 1e-9)
    acc = float(np.mean(sampler.acceptance_fraction))
    try:
        tau = float(np.max(sampler.get_autocorr_time(tol=0, quiet=True)))
    except Exception:          # too few steps for an estimate
        tau = float("nan")
    if needed is None:
        eta = (total - i) / rate if rate > 0 else float("nan")
        print(f"[lossfit] step {i}/{total}  acceptance {acc:.3f}  tau~{tau:.1f}  "
              f"{rate:.1f} steps/s  ETA {eta:.0f} s", file=stream, flush=True)
    else:
        print(f"[lossfit] step {i} (auto, at most {total})  acceptance {acc:.3f}  tau~{tau:.1f}  "
              f"converged at ~{needed} steps  {rate:.1f} steps/s", file=stream, flush=True)


def sample(log_prob, p0, steps, *, backend=None, pool=None, seed=None, progress=False,
           log_every=None, log_stream=None, checkpoint_every=100, names=None, metadata=None,
           max_steps=None, check_every=CHECK_EVERY, vectorize=False):
    """Run (or resume) an affine-invariant ensemble on ``log_prob``.

    Parameters
    ----------
    log_prob : callable
        theta (1-D array) -> log posterior; must be picklable to use a process pool.
    p0 : ndarray, shape (walkers, ndim)
        Start positions (ignored when the backend already holds steps).
    steps : int or "auto"
        Total number of steps wanted in the backend; ``"auto"``: sample until
        :func:`convergence_state` says the chain is long enough (checked every
        ``check_every`` steps), at most ``max_steps``.
    max_steps : int, optional
        Cap of an automatic run (default :data:`DEFAULT_MAX_STEPS`).
    check_every : int
        Steps between convergence checks of an automatic run.
    vectorize : bool
        ``log_prob`` takes the whole walker set (W, ndim) and returns W values (emcee's
        vectorised mode; it then does its own parallel work and ``pool`` must be None).
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
    auto = isinstance(steps, str) and steps == AUTO_STEPS
    if auto:
        steps = DEFAULT_MAX_STEPS if max_steps is None else max_steps
        if isinstance(steps, bool) or not isinstance(steps, (int, np.integer)) or steps < 2 * check_every:
            raise LossfitValueError("max_steps", f"must be an integer >= {2 * check_every}, got {max_steps!r}")
    store, done = open_backend(backend, walkers, ndim, every=checkpoint_every, names=names,
                               metadata=metadata)
    if metadata and isinstance(store, CheckpointBackend):
        store.metadata.update(metadata)
    if vectorize and pool is not None:
        raise LossfitValueError("pool", "a vectorised log_prob splits the walkers itself; pass pool=None")
    # emcee's stretch move with the acceptance of a half-ensemble in one array operation
    # (the same chain, bit for bit: lossfit.inference.moves)
    move = WalkerSetStretchMove(vectorized=vectorize)
    sampler = emcee.EnsembleSampler(walkers, ndim, log_prob, pool=pool, backend=store, vectorize=vectorize,
                                    moves=move)
    if done == 0:
        store.reset(walkers, ndim)
        start = emcee.State(p0, random_state=np.random.RandomState(seed).get_state())
    else:
        start = store.get_last_sample()
    stream = log_stream or sys.stderr
    t0 = time.perf_counter()
    reason, tau, needed = "fixed length", float("nan"), None
    if auto:
        reason = "max_steps"
        if done and done % check_every == 0:
            # a resumed automatic run: the check the first run took at this step
            converged, tau, needed = convergence_state(store.get_chain(), check_every)
            if converged:
                steps, reason = done, "converged"
    bar = _AutoBar(steps, done) if auto and progress else None
    with _SignalGuard() as guard:
        if done < steps:
            for _ in _steps(sampler, move, store, start, steps - done, progress=progress and not auto):
                i = store.iteration
                if auto and i % check_every == 0:
                    converged, tau, needed = convergence_state(store.get_chain(), check_every)
                    if bar is not None:
                        bar.note(tau, needed)
                    if converged:
                        reason = "converged"
                if bar is not None:
                    bar.update()
                if log_every and (i % log_every == 0 or i == steps or reason == "converged"):
                    _log_line(stream, i, steps, sampler, t0, done, needed if auto else None)
                if guard.signum is not None or reason == "converged":
                    break
    if bar is not None:
        bar.close()
    if isinstance(store, CheckpointBackend):
        store.flush()
    if guard.signum is not None and store.iteration < steps and reason != "converged":
        raise Interrupted(guard.signum, store.iteration)
    return ChainRun(chain=store.get_chain(), log_prob=store.get_log_prob(),
                    acceptance=store.accepted / max(store.iteration, 1), resumed_from=done,
                    stop_reason=reason, tau=tau)


def _steps(sampler, move, store, start, iterations, progress=False):
    """emcee's ``EnsembleSampler.sample`` for one move, kept in ``store`` at every step
    (``thin_by=1``): the same checks, random draws and chain, yielding after each step.

    emcee copies its random state into the state of every step and draws the move from
    its list by ``choice``, both costly next to a vectorised step; here the random state
    is read only when the backend writes (:class:`CheckpointBackend`) and at the end, and
    the move's draw is the one uniform ``choice`` would take (measured in
    docs/architecture.md, "The sampler step of a spectrum fit").
    """
    state = emcee.State(start, copy=True)
    walkers = sampler.nwalkers
    if np.shape(state.coords) != (walkers, sampler.ndim):
        raise ValueError(f"incompatible input dimensions {np.shape(state.coords)}")
    if not walkers_independent(state.coords):
        raise ValueError("Initial state has a large condition number. Make sure that your walkers are linearly "
                         "independent for the best performance")
    random = np.random.RandomState()
    if state.random_state is not None:
        # none given: emcee too keeps its generator's own (entropy-seeded) state
        random.set_state(state.random_state)
    if state.log_prob is None:
        state.log_prob, state.blobs = sampler.compute_log_prob(state.coords)
    if np.shape(state.log_prob) != (walkers,):
        raise ValueError("incompatible input dimensions")
    if np.any(np.isnan(state.log_prob)):
        raise ValueError("The initial log_prob was NaN")
    store.grow(iterations, state.blobs)
    model = Model(sampler.log_prob_fn, sampler.compute_log_prob, map if sampler.pool is None else sampler.pool.map,
                  random)
    if isinstance(store, CheckpointBackend):
        store.generator = random
    bar = tqdm(total=iterations) if progress else None
    try:
        for _ in range(iterations):
            random.random_sample()          # emcee's choice of a move among one: one uniform
            state, accepted = move.propose(model, state)
            store.save_step(state, accepted)
            if bar is not None:
                bar.update(1)
            yield state
    finally:
        store.random_state = random.get_state()
        if isinstance(store, CheckpointBackend):
            store.generator = None
        if bar is not None:
            bar.close()


def stop_record(run):
    """Settings entries that say why a run stopped (for results and summary.json)."""
    record = {"stopped": run.stop_reason}
    if run.stop_reason != "fixed length":
        record["tau_at_stop"] = run.tau
    return record


class _AutoBar:
    """tqdm bar of an automatic run: counts steps up to the cap and shows the
    convergence estimate (tau and the chain length the rule asks for)."""

    def __init__(self, total, initial):
        self._bar = tqdm(total=total, initial=initial, desc="sampling (auto)")

    def note(self, tau, needed):
        self._bar.set_postfix_str(f"tau~{tau:.1f}, converged at ~{needed} steps")

    def update(self):
        self._bar.update(1)

    def close(self):
        self._bar.close()

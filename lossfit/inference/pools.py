"""Pools with a ``map`` method for the sampler: serial, processes on one node, MPI.

emcee evaluates the log posteriors of half the ensemble per ``map`` call, so the
work per call is (walkers / 2) likelihoods (a global fit of decay curves on more
workers splits its curves as well: :class:`lossfit.inference.posterior.WalkerBlocks`);
parallelism pays once one likelihood costs well above the messaging overhead (about
0.1 ms for MPI on one node).
"""

__all__ = ["mpi_size", "SerialPool", "MPIPool", "make_pool", "find_mpiexec"]

import multiprocessing
import os
import shutil
import sys
import time

from ..errors import LossfitValueError


class SerialPool:
    """``map`` in the calling process."""

    def map(self, func, iterable):
        return list(map(func, iterable))

    def close(self):
        pass

    def is_master(self):
        return True


class MPIPool:
    """Ranks > 0 evaluate tasks that rank 0 hands out; rank 0 works too.

    The function goes to the workers once (when it changes); each ``map`` sends every
    worker its share of the tasks (one block of walkers each when the sampler runs
    vectorised, :class:`lossfit.inference.posterior.WalkerBlocks`), works on its own
    share and collects the results in order. Waiting ranks do not spin: a worker waiting
    for work, and rank 0 waiting for a worker's results, poll for the message with a
    growing sleep (after 2 ms of polling: 10 us doubling up to 1 ms), so a waiting rank
    costs no CPU (MPI's blocking receive busy-polls). mpi4py's own executor
    (``mpi4py.futures.MPICommExecutor``) was not used: its root rank only hands out work,
    so on 2 ranks one rank would compute (measured and discussed in docs/cluster.md).
    Use as::

        pool = MPIPool()
        if not pool.is_master():
            pool.wait()          # workers serve until the master closes the pool
            sys.exit(0)
        ...sampler with pool=pool...
        pool.close()
    """

    _TAG = 11
    _BACKOFF = (1e-5, 1e-3)
    _SPIN = 2e-3

    def __init__(self, comm=None):
        try:
            from mpi4py import MPI  # optional dependency: only the MPI pool needs it
        except ImportError as err:
            raise LossfitValueError("pool", "the MPI pool needs mpi4py: pip install 'lossfit[mpi]'") from err
        self.comm = comm if comm is not None else MPI.COMM_WORLD
        self.rank = self.comm.Get_rank()
        self.size = self.comm.Get_size()
        self._func = None

    def is_master(self):
        return self.rank == 0

    def _receive(self, source=0):
        # probe polled with a growing sleep (waiting ranks leave the CPU free), then a
        # blocking receive sized to the message: irecv's default 32 KiB buffer truncates a
        # pickled campaign posterior (tens of KiB to MBs) and left the master waiting forever.
        # During a run the next message follows within a few ms, so the probe spins for
        # _SPIN seconds before it starts to sleep (sleeping at once cost ~1 ms per map).
        # Workers wait so for work, rank 0 for its workers' results.
        spin_until = time.perf_counter() + self._SPIN
        while not self.comm.Iprobe(source=source, tag=self._TAG):
            if time.perf_counter() > spin_until:
                break
        else:
            return self.comm.recv(source=source, tag=self._TAG)
        pause = self._BACKOFF[0]
        while not self.comm.Iprobe(source=source, tag=self._TAG):
            time.sleep(pause)
            pause = min(2.0 * pause, self._BACKOFF[1])
        return self.comm.recv(source=source, tag=self._TAG)

    def wait(self):
        """Worker loop: serve map requests until the master closes the pool."""
        func = None
        while True:
            kind, payload = self._receive()
            if kind == "stop":
                return
            if kind == "func":
                func = payload
                continue
            self.comm.send([func(x) for x in payload], dest=0, tag=self._TAG)

    def map(self, func, iterable):
        items = list(iterable)
        workers = range(1, self.size)
        # equality, not identity: ``obj.method`` is a new bound-method object at every
        # access, and identity re-sent the pickled posterior with every map
        if func != self._func:
            for r in workers:
                self.comm.send(("func", func), dest=r, tag=self._TAG)
            self._func = func
        chunks = [items[r::self.size] for r in range(self.size)]
        for r in workers:
            self.comm.send(("map", chunks[r]), dest=r, tag=self._TAG)
        out = [None] * len(items)
        out[0::self.size] = [func(x) for x in chunks[0]]
        for r in workers:
            out[r::self.size] = self._receive(source=r)
        return out

    def close(self):
        if self.is_master():
            for r in range(1, self.size):
                self.comm.send(("stop", None), dest=r, tag=self._TAG)


def make_pool(kind, workers=None):
    """A pool by name: ``"serial"``, ``"processes"`` (``workers`` processes, default
    the number of CPUs) or ``"mpi"`` (every rank of ``mpiexec``)."""
    if kind == "serial":
        return SerialPool()
    if kind == "processes":
        if workers is not None and (not isinstance(workers, int) or workers < 1):
            raise LossfitValueError("workers", f"must be a positive integer, got {workers!r}")
        return multiprocessing.get_context("fork").Pool(workers)
    if kind == "mpi":
        return MPIPool()
    raise LossfitValueError("pool", f"must be 'serial', 'processes' or 'mpi', got {kind!r}")


def mpi_size():
    """Number of MPI ranks this process runs among: 1 without mpi4py or outside mpiexec."""
    try:
        from mpi4py import MPI  # optional dependency: only the MPI pool needs it
    except ImportError:
        return 1
    return MPI.COMM_WORLD.Get_size()


def find_mpiexec():
    """Path of ``mpiexec``: the one pip installed beside this interpreter (the mpich
    wheel of the ``mpi`` extra), else the first on PATH, else None."""
    beside = os.path.join(os.path.dirname(sys.executable), "mpiexec")
    return beside if os.path.exists(beside) else shutil.which("mpiexec")

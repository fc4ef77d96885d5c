"""Pools with a ``map`` method for the sampler: serial, processes on one node, MPI.

emcee evaluates the log posteriors of half the ensemble per ``map`` call, so the
work per call is (walkers / 2) likelihoods; parallelism pays once one likelihood
costs well above the messaging overhead (about 0.1 ms for MPI on one node).
"""

__all__ = ["mpi_size", "SerialPool", "MPIPool", "make_pool", "find_mpiexec"]

import multiprocessing
import os
import shutil
import sys

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

    The function is broadcast once (when it changes); each ``map`` broadcasts the
    task list and gathers the results in order. Use as::

        pool = MPIPool()
        if not pool.is_master():
            pool.wait()          # workers serve until the master closes the pool
            sys.exit(0)
        ...sampler with pool=pool...
        pool.close()
    """

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

    def wait(self):
        """Worker loop: serve map requests until the master closes the pool."""
        func = None
        while True:
            kind, payload = self.comm.bcast(None, root=0)
            if kind == "stop":
                return
            if kind == "func":
                func = payload
                continue
            self.comm.gather([func(x) for x in payload[self.rank]], root=0)

    def map(self, func, iterable):
        items = list(iterable)
        if func is not self._func:
            self.comm.bcast(("func", func), root=0)
            self._func = func
        chunks = [items[r::self.size] for r in range(self.size)]
        self.comm.bcast(("map", chunks), root=0)
        mine = [func(x) for x in chunks[0]]
        gathered = self.comm.gather(mine, root=0)
        out = [None] * len(items)
        for r, results in enumerate(gathered):
            out[r::self.size] = results
        return out

    def close(self):
        if self.is_master() and self.size > 1:
            self.comm.bcast(("stop", None), root=0)


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

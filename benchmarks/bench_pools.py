"""Speed-up of the process and MPI pools on 2 workers for a ~2 ms likelihood.

Run: python benchmarks/bench_pools.py        (serial + processes, then launches MPI)
The MPI part re-runs this file as ``mpiexec -n 2 python bench_pools.py --mpi``.
Target (docs/architecture.md, targets): >= 1.8x on 2 ranks, measured against the serial pool in the same run.
"""

import os
import subprocess
import sys
import time
import warnings

import numpy as np

import lossfit as lf
from lossfit.inference.fitting import prepare
from lossfit.inference.pools import find_mpiexec, make_pool
from lossfit.inference.posterior import WalkerBlocks
from lossfit.inference.sampling import sample

WALKERS, STEPS = 16, 25




def heavy_posterior():
    """An invented spectrum large enough that one likelihood costs about 2 ms."""
    warnings.simplefilter("ignore", lf.errors.ValidityWarning)
    ef = lf.Efimov(a_minus=-900.0, eta_minus=0.07)
    a = -np.geomspace(450.0, 3500.0, 600)
    spectra = []
    for t in (10.0, 30.0, 100.0, 300.0):
        m = lf.l3(a, t, species="133Cs", efimov=ef)
        spectra.append(lf.LossSpectrum(a, t, m, 0.15 * m))
    space, like, post = prepare(spectra, species="133Cs", free=["a_minus", "eta_minus"])
    theta0 = space.theta([-900.0, 0.07])
    return post, theta0


def timed_run(pool, vectorized=False):
    """Seconds for the run; ``vectorized``: the walker set in blocks, one per worker, as
    lf.fit samples (WalkerBlocks), else one walker per task (emcee's map)."""
    post, theta0 = heavy_posterior()
    rng = np.random.default_rng(0)
    p0 = theta0 + 1e-3 * rng.standard_normal((WALKERS, 2))
    t0 = time.perf_counter()
    if vectorized:
        sample(WalkerBlocks(post, pool), p0, STEPS, vectorize=True, seed=1)
    else:
        sample(post, p0, STEPS, pool=pool, seed=1)
    return time.perf_counter() - t0


def one_likelihood_ms():
    post, theta0 = heavy_posterior()
    post(theta0)
    t0 = time.perf_counter()
    for _ in range(50):
        post(theta0)
    return (time.perf_counter() - t0) / 50 * 1e3


if __name__ == "__main__":
    if "--mpi" in sys.argv:
        pool = make_pool("mpi")
        if not pool.is_master():
            heavy_posterior()          # compile before the master starts timing
            pool.wait()
            sys.exit(0)
        elapsed = timed_run(pool)
        blocks = timed_run(pool, vectorized=True)
        pool.close()
        print(f"MPI_SECONDS {elapsed:.4f} {blocks:.4f}")
        sys.exit(0)
    print(f"one likelihood: {one_likelihood_ms():.2f} ms; {WALKERS} walkers x {STEPS} steps")
    serial = min(timed_run(None) for _ in range(2))
    print(f"serial pool:            {serial:6.2f} s")
    with make_pool("processes", 2) as pool:
        procs = min(timed_run(pool) for _ in range(2))
        procs_blocks = min(timed_run(pool, vectorized=True) for _ in range(2))
    print(f"processes pool (2):     {procs:6.2f} s   speed-up {serial / procs:.2f}x (target >= 1.8x)")
    print(f"  walker blocks (2):    {procs_blocks:6.2f} s   speed-up {serial / procs_blocks:.2f}x")
    mpiexec = find_mpiexec()
    if mpiexec is None:
        print("mpiexec not found: install the 'mpi' extra for the MPI measurement")
    else:
        out = subprocess.run([mpiexec, "-n", "2", sys.executable, os.path.abspath(__file__), "--mpi"],
                             capture_output=True, text=True)
        line = [ln for ln in out.stdout.splitlines() if ln.startswith("MPI_SECONDS")]
        if line:
            mpi, mpi_blocks = map(float, line[0].split()[1:3])
            print(f"MPI pool (2 ranks):     {mpi:6.2f} s   speed-up {serial / mpi:.2f}x (target >= 1.8x)")
            print(f"  walker blocks:        {mpi_blocks:6.2f} s   speed-up {serial / mpi_blocks:.2f}x")
        else:
            print("MPI run failed:", out.stderr[-500:])

import os
import subprocess
import sys
import warnings

# pytest -n 2 runs two workers on two cores: one BLAS/OpenMP thread each, set before
# numpy loads (matplotlib brings it), or the workers' threads fight for the cores
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import matplotlib  # noqa: E402

matplotlib.use("Agg")

import pytest  # noqa: E402

import lossfit  # noqa: E402
from lossfit.errors import ValidityWarning  # noqa: E402

_WARM = os.path.join(os.path.dirname(os.path.abspath(__file__)), "_warm_kernels.py")


def pytest_sessionstart(session):
    # numba caches compiled kernels on disk beside the package (cache=True). On a fresh
    # install nothing is cached, and the xdist workers and the command-line subprocesses
    # of the tests would each compile the same kernels side by side (tens of seconds of
    # CPU each). The controller compiles them once, in two processes over disjoint parts,
    # before the workers start (xdist starts them after this hook); later processes load
    # them. With a warm cache this costs the two imports.
    config = session.config
    if hasattr(config, "workerinput") or not getattr(config.option, "numprocesses", None):
        return
    # the warm-up must compile the lossfit the tests import (the checkout, not a copy
    # installed in site-packages: numba's cache belongs to one source file)
    package_root = os.path.dirname(os.path.dirname(os.path.abspath(lossfit.__file__)))
    env = dict(os.environ, MPLBACKEND="Agg",
               PYTHONPATH=os.pathsep.join(filter(None, [package_root, os.environ.get("PYTHONPATH")])))
    parts = [subprocess.Popen([sys.executable, _WARM, part], env=env, stdout=subprocess.DEVNULL,
                              stderr=subprocess.PIPE, text=True) for part in ("rates", "curves")]
    for proc in parts:
        _, err = proc.communicate()
        if proc.returncode:
            # a failure here shows up again, explained, in the tests themselves
            print(f"kernel warm-up failed: {err.strip().splitlines()[-1:]}", file=sys.stderr)


@pytest.fixture(autouse=True)
def _quiet_validity():
    # Synthetic scenarios reach |a| of a few r_vdW on purpose; the warning itself is
    # tested explicitly where it matters.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        yield

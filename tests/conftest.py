import os
import subprocess
import warnings

# pytest -n 2 runs two workers on two cores: one BLAS/OpenMP thread each, set before
# numpy loads (matplotlib brings it), or the workers' threads fight for the cores
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")
# numba compiles the kernels at LLVM optimisation level 1 instead of 3 in the tests (and in
# the command-line and notebook processes they start, which inherit it): on a fresh cache,
# as in CI, compiling is the largest single cost of the run (the spectrum demo compiled for
# 18 s at level 3, 11 s at level 1), and lossfit's kernels run as fast at level 1 (decay
# integration 9.7 vs 11.1 us per curve, thermal plan 112 vs 121 us per 16 walkers; no
# fastmath, so the arithmetic is the same). Speed is measured by benchmarks/, not here.
os.environ.setdefault("NUMBA_OPT", "1")

import matplotlib  # noqa: E402

matplotlib.use("Agg")

import pytest  # noqa: E402

from lossfit.cli import main as cli_main  # noqa: E402
from lossfit.errors import ValidityWarning  # noqa: E402


@pytest.fixture(autouse=True)
def _quiet_validity():
    # Synthetic scenarios reach |a| of a few r_vdW on purpose; the warning itself is
    # tested explicitly where it matters.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        yield


@pytest.fixture
def run_cli(capsys):
    """``lossfit ARGS`` inside the test process, as a CompletedProcess (exit code, stdout,
    stderr). For refusals and re-reads of finished folders: a new interpreter would spend
    ~3 s importing the library for a few milliseconds of work. Runs that sample, signals,
    locks of other processes and the exit status seen by a shell keep real processes."""
    def run(*args):
        capsys.readouterr()
        argv = [str(a) for a in args]
        try:
            code = cli_main(argv)
        except SystemExit as stop:          # argparse's own refusals
            code = stop.code
        out = capsys.readouterr()
        return subprocess.CompletedProcess(["lossfit", *argv], code, out.out, out.err)
    return run


# Tests that start other processes (the command line, notebooks, MPI ranks) and the long
# tests that compile nothing of lossfit's (the guide build, the van der Waals solves).
_SPAWNING = "tests/batch/"
_LAST = ("test_guide.py::test_guide_builds_with_warnings_as_errors",
         "test_binding.py::test_van_der_waals_tends_to_the_universal_law_and_is_converged")


def pytest_collection_modifyitems(config, items):
    # On a fresh numba cache (CI) every process compiles the kernels it calls until one
    # has written them to the cache. The tests in this process compile them once; the
    # processes that tests start come after them and load the cache instead of compiling
    # the same kernels again, each on its own. The long numba-free tests come last, to
    # fill the second core while the other worker finishes.
    def rank(item):
        # node ids are paths relative to the repository root, with forward slashes
        if item.nodeid.endswith(_LAST):
            return 2
        return 1 if item.nodeid.startswith(_SPAWNING) else 0
    items.sort(key=rank)          # a stable sort: collection order within each group

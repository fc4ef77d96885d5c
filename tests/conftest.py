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

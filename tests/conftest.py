import os
import warnings

# pytest -n 2 runs two workers on two cores: one BLAS/OpenMP thread each, set before
# numpy loads (matplotlib brings it), or the workers' threads fight for the cores
for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import matplotlib  # noqa: E402

matplotlib.use("Agg")

import pytest  # noqa: E402

from lossfit.errors import ValidityWarning  # noqa: E402


@pytest.fixture(autouse=True)
def _quiet_validity():
    # Synthetic scenarios reach |a| of a few r_vdW on purpose; the warning itself is
    # tested explicitly where it matters.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ValidityWarning)
        yield

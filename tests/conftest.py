import warnings

import matplotlib

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

"""Fit results for the figure tests without sampling: the demo's invented spectra with a
synthetic, seeded chain of Gaussian scatter around a centre in the sampling coordinates
theta = ln|value| (figures need a posterior's shape, not a converged one)."""

import warnings

import numpy as np
import pytest

from lossfit.errors import ConvergenceWarning, FitCheckWarning
from lossfit.inference.fitting import prepare
from lossfit.inference.posterior import make_result


def _synthetic_result(spectra, free, centre, widths, *, tie=None, exclude=None, seed=7):
    """A FitResult of ``spectra`` whose chain (80 steps x 12 walkers, burn-in 20) scatters
    by ``widths`` (in ln|value|) around ``centre`` (physical values, ``free`` order)."""
    space, likelihood, _ = prepare(spectra, species="133Cs", free=free, tie=tie, exclude=exclude)
    rng = np.random.default_rng(seed)
    chain = np.log(np.abs(centre)) + np.asarray(widths) * rng.standard_normal((80, 12, len(free)))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        warnings.simplefilter("ignore", FitCheckWarning)
        return make_result(space, likelihood, chain, np.zeros((80, 12)), np.full(12, 0.4), burn=20)


@pytest.fixture(scope="session")
def synthetic_result():
    """:func:`_synthetic_result`, for fixtures of the figure tests."""
    return _synthetic_result

"""Per-curve fits, kept under their former name: the code lives in
:mod:`lossfit.inference.curve_fits` (the inference layer, beside the global fit)."""

from .inference.curve_fits import *  # noqa: F401,F403
from .inference.curve_fits import __all__  # noqa: F401

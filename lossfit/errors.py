"""Exception types raised by lossfit.

Every error that bad user input can trigger is a :class:`LossfitValueError`, a
``ValueError`` subclass whose message names the offending argument and value.
"""

__all__ = ["LossfitError", "LossfitValueError", "Interrupted", "OutputConflict", "ConvergenceWarning",
           "FitCheckWarning", "ValidityWarning",
           "as_real_array", "check_finite", "check_positive", "check_frequencies", "check_nonzero", "check_times",
           "check_table",
           "is_real", "user_stacklevel"]

import numbers
import os
import sys

import numpy as np

_PACKAGE = os.path.dirname(os.path.abspath(__file__))


def user_stacklevel():
    """The ``stacklevel`` that makes a warning point at the first caller outside lossfit
    (the user's script or notebook cell), however deep inside lossfit it is raised."""
    frame, level = sys._getframe(1), 1
    while frame is not None and os.path.abspath(frame.f_code.co_filename).startswith(_PACKAGE):
        frame, level = frame.f_back, level + 1
    return level


def is_real(value):
    """True for a real scalar (Python or numpy int/float), False for bool and others."""
    return isinstance(value, numbers.Real) and not isinstance(value, (bool, np.bool_))


class LossfitError(Exception):
    """Base class of all lossfit exceptions."""


class LossfitValueError(LossfitError, ValueError):
    """An argument has a bad value; the message names the argument."""

    def __init__(self, argument, message):
        self.argument = argument
        super().__init__(f"{argument}: {message}")


class Interrupted(LossfitError):
    """Sampling stopped on a signal after the chain was checkpointed (resumable)."""

    def __init__(self, signum, iteration, saved=True):
        self.signum = signum
        self.iteration = iteration
        if saved:
            text = f"stopped by signal {signum} at step {iteration}; the chain is saved and the run resumes from there"
        else:
            text = f"stopped by signal {signum} before sampling began; nothing was saved"
        super().__init__(text)


class OutputConflict(LossfitError):
    """The output folder is locked or holds results that must not be overwritten."""


class ConvergenceWarning(UserWarning):
    """A Markov chain is too short for its autocorrelation time."""


class FitCheckWarning(UserWarning):
    """A finished fit fails a check: poor goodness of fit, a posterior piled on a prior
    bound, or inputs whose magnitude suggests a unit slip (lossfit.inference.fit_checks)."""


class ValidityWarning(UserWarning):
    """Input lies outside the validity range of the physical model (warn, not refuse)."""


def _describe(values):
    values = np.asarray(values)
    return repr(values.item()) if values.size == 1 else f"array with bad entries {values[:5]!r}"


def as_real_array(name, value):
    """Return ``value`` as a float array; booleans, strings, None and complex numbers are
    not numbers here (``True`` would otherwise read as 1 nK, ``"5"`` as 5 a0)."""
    if value is None:
        raise LossfitValueError(name, "is required, got None")
    try:
        arr = np.asarray(value)
    except ValueError as err:             # ragged nested sequences
        raise LossfitValueError(name, f"must be a number or an array of numbers ({err})") from None
    kind = arr.dtype.kind
    if kind == "O":
        items = arr.ravel().tolist()
        if not all(is_real(v) for v in items):
            bad = next(v for v in items if not is_real(v))
            raise LossfitValueError(name, f"must contain real numbers only, got {bad!r}")
        return arr.astype(float)
    if kind not in "iuf":
        what = {"b": "booleans", "U": "strings", "S": "strings", "c": "complex numbers"}.get(kind, arr.dtype.name)
        raise LossfitValueError(name, f"must be a real number or an array of real numbers, got {what} "
                                f"({_describe(arr)})")
    return arr.astype(float, copy=False)


def check_finite(name, value):
    """Return ``value`` as a float array, raising if any entry is not a real number (see
    :func:`as_real_array`) or is NaN or infinite."""
    arr = as_real_array(name, value)
    bad = ~np.isfinite(arr)
    if bad.any():
        raise LossfitValueError(name, f"must be finite, got {_describe(arr[bad])}")
    return arr


def check_frequencies(name, value):
    """Three trap frequencies (f_x, f_y, f_z) in Hz as a read-only float array, raising
    (naming ``name``) unless there are exactly three finite positive numbers."""
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise LossfitValueError(name, f"must be three frequencies (f_x, f_y, f_z) in Hz, got {value!r}") from None
    if arr.shape != (3,):
        raise LossfitValueError(name, f"must be three frequencies (f_x, f_y, f_z) in Hz, got shape {arr.shape}")
    arr = np.array(check_positive(name, arr))
    arr.setflags(write=False)
    return arr


def check_positive(name, value, *, allow_zero=False):
    """Return ``value`` as a float array, raising unless every entry is finite and > 0."""
    arr = check_finite(name, value)
    bad = arr < 0 if allow_zero else arr <= 0
    if bad.any():
        word = "non-negative" if allow_zero else "positive"
        raise LossfitValueError(name, f"must be {word}, got {_describe(arr[bad])}")
    return arr


def check_times(name, value):
    """Return ``value`` as a contiguous float array of times in s: 1-d, non-empty, >= 0
    (counted from the initial state at t = 0) and strictly increasing."""
    arr = check_finite(name, value)
    if arr.ndim != 1 or arr.size == 0:
        raise LossfitValueError(name, f"must be a non-empty 1-d array of times in s, got shape {arr.shape}")
    if arr[0] < 0:
        raise LossfitValueError(name, f"times are counted from the initial state at t = 0 and must be "
                                f">= 0, got {arr[0]!r}")
    if np.any(np.diff(arr) <= 0):
        i = int(np.argmax(np.diff(arr) <= 0))
        raise LossfitValueError(name, f"must be strictly increasing, got {name}[{i}] = {arr[i]!r} "
                                f"followed by {arr[i + 1]!r}")
    return np.ascontiguousarray(arr)


def check_table(x_name, x, y_name, y, min_points):
    """Check a tabulated function: 1-d ``x`` and ``y`` arrays of equal length >= ``min_points``
    with ``x`` strictly increasing (both already converted by the caller's checks)."""
    if x.ndim != 1 or x.shape != y.shape or x.size < min_points:
        raise LossfitValueError(y_name, f"need 1-d {x_name} and {y_name} of equal length >= {min_points}, "
                                f"got shapes {x.shape} and {y.shape}")
    if np.any(np.diff(x) <= 0):
        raise LossfitValueError(x_name, "must be strictly increasing")
    return x, y


def check_nonzero(name, value):
    """Return ``value`` as a float array, raising if any entry is zero or non-finite."""
    arr = check_finite(name, value)
    bad = arr == 0
    if bad.any():
        raise LossfitValueError(name, "must be non-zero (the zero-range theory needs |a| > 0)")
    return arr

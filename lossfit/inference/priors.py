"""Priors on fit parameters, stated in physical units.

Parameters are sampled in ``theta = ln|value|`` (well conditioned for lengths and
inelasticities spanning decades); each prior returns its log density *in theta*,
i.e. including the Jacobian ``|d value / d theta| = |value|``.
"""

__all__ = ["Prior", "LogUniform", "Uniform", "LogNormal", "Normal"]

import math

import numpy as np

from ..errors import LossfitValueError


class Prior:
    """Base class: a one-dimensional prior on a parameter that keeps one sign."""

    #: +1 or -1: the sign of every value in the support.
    sign = 1.0

    def log_pdf(self, value):
        """Log density in physical units (value must have the prior's sign)."""
        raise NotImplementedError

    def sample(self, rng, size):
        """Draw ``size`` values (physical units) with a numpy Generator."""
        raise NotImplementedError

    def log_density_theta(self, theta):
        """Log density in theta = ln|value| (Jacobian included)."""
        value = self.sign * math.exp(theta)
        return self.log_pdf(value) + theta

    def log_density_theta_many(self, theta):
        """:meth:`log_density_theta` of every entry of a 1-D array (subclasses may do it
        without a Python loop)."""
        return np.array([self.log_density_theta(float(t)) for t in theta])

    def describe(self):
        """Short text for tables and job files."""
        return repr(self)


def _sign_of_pair(name, lo, hi):
    for arg, v in (("lo", lo), ("hi", hi)):
        if not (isinstance(v, (int, float, np.floating)) and math.isfinite(v) and v != 0):
            raise LossfitValueError(f"{name}.{arg}", f"must be a finite non-zero number, got {v!r}")
    if (lo > 0) != (hi > 0):
        raise LossfitValueError(name, f"bounds must share a sign, got ({lo!r}, {hi!r})")
    if abs(hi) == abs(lo):
        raise LossfitValueError(name, f"bounds must differ, got ({lo!r}, {hi!r})")
    return 1.0 if lo > 0 else -1.0


class LogUniform(Prior):
    """Uniform in ln|value| between two bounds of the same sign.

    Parameters
    ----------
    lo, hi : float
        Bounds in physical units (order does not matter; both negative for a_-).
    """

    def __init__(self, lo, hi):
        self.sign = _sign_of_pair("LogUniform", lo, hi)
        self.lo, self.hi = sorted((abs(float(lo)), abs(float(hi))))
        self._norm = math.log(math.log(self.hi / self.lo))

    def log_pdf(self, value):
        v = value * self.sign
        if not (self.lo <= v <= self.hi):
            return -math.inf
        return -math.log(v) - self._norm

    def log_density_theta(self, theta):
        if not (math.log(self.lo) <= theta <= math.log(self.hi)):
            return -math.inf
        return -self._norm

    def log_density_theta_many(self, theta):
        inside = (math.log(self.lo) <= theta) & (theta <= math.log(self.hi))
        return np.where(inside, -self._norm, -math.inf)

    def sample(self, rng, size):
        return self.sign * np.exp(rng.uniform(math.log(self.lo), math.log(self.hi), size))

    def __repr__(self):
        return f"LogUniform({self.sign * self.lo:g}, {self.sign * self.hi:g})"


class Uniform(Prior):
    """Uniform in value between two bounds of the same sign."""

    def __init__(self, lo, hi):
        self.sign = _sign_of_pair("Uniform", lo, hi)
        self.lo, self.hi = sorted((abs(float(lo)), abs(float(hi))))

    def log_pdf(self, value):
        v = value * self.sign
        if not (self.lo <= v <= self.hi):
            return -math.inf
        return -math.log(self.hi - self.lo)

    def sample(self, rng, size):
        return self.sign * rng.uniform(self.lo, self.hi, size)

    def __repr__(self):
        return f"Uniform({self.sign * self.lo:g}, {self.sign * self.hi:g})"


class LogNormal(Prior):
    """ln(value / median) ~ Normal(0, sigma): a positive scale factor known to ~sigma.

    Parameters
    ----------
    median : float
        Median in physical units (> 0).
    sigma : float
        Standard deviation of ln(value) (> 0); 0.2 means "known to about 20 %".
    """

    def __init__(self, median, sigma):
        for arg, v in (("median", median), ("sigma", sigma)):
            if not (isinstance(v, (int, float, np.floating)) and math.isfinite(v) and v > 0):
                raise LossfitValueError(f"LogNormal.{arg}", f"must be positive and finite, got {v!r}")
        self.median, self.sigma = float(median), float(sigma)

    def log_pdf(self, value):
        if value <= 0:
            return -math.inf
        return self.log_density_theta(math.log(value)) - math.log(value)

    def log_density_theta(self, theta):
        z = (theta - math.log(self.median)) / self.sigma
        return -0.5 * z * z - math.log(self.sigma * math.sqrt(2.0 * math.pi))

    def log_density_theta_many(self, theta):
        # the same operations elementwise (IEEE arithmetic: the same bits as one by one)
        z = (np.asarray(theta, dtype=float) - math.log(self.median)) / self.sigma
        return -0.5 * z * z - math.log(self.sigma * math.sqrt(2.0 * math.pi))

    def sample(self, rng, size):
        return self.median * np.exp(self.sigma * rng.standard_normal(size))

    def __repr__(self):
        return f"LogNormal(median={self.median:g}, sigma={self.sigma:g})"


class Normal(Prior):
    """Normal(mu, sigma) truncated to the sign of mu."""

    def __init__(self, mu, sigma):
        if not (math.isfinite(mu) and mu != 0):
            raise LossfitValueError("Normal.mu", f"must be finite and non-zero, got {mu!r}")
        if not (math.isfinite(sigma) and sigma > 0):
            raise LossfitValueError("Normal.sigma", f"must be positive and finite, got {sigma!r}")
        self.mu, self.sigma = float(mu), float(sigma)
        self.sign = 1.0 if mu > 0 else -1.0

    def log_pdf(self, value):
        if value * self.sign <= 0:
            return -math.inf
        z = (value - self.mu) / self.sigma
        return -0.5 * z * z

    def sample(self, rng, size):
        out = self.mu + self.sigma * rng.standard_normal(size)
        bad = out * self.sign <= 0
        while bad.any():
            out[bad] = self.mu + self.sigma * rng.standard_normal(bad.sum())
            bad = out * self.sign <= 0
        return out

    def __repr__(self):
        return f"Normal({self.mu:g}, {self.sigma:g})"

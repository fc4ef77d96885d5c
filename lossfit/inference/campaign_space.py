"""The parameter space of a global fit: the Efimov parameters of :func:`lossfit.fit` plus
the campaign-wide systematic nuisances, ``density_scale`` (number/density calibration),
``temperature_scale`` (thermometry), the resonance parameters ``b0``, ``width``, ``a_bg``
of a(B) (Chin et al., RMP 82, 1225 (2010)) and the field noise ``sigma_B`` (G), with the
shorthand that turns ``systematics=`` into priors.
"""

__all__ = ["CampaignSpace", "systematic_priors", "SYSTEMATIC_NAMES", "EXTRA_NAMES", "RESONANCE_NAMES"]


import math

import numpy as np

from ..errors import LossfitValueError
from ..experiment.feshbach import resonance_covariance
from .parameters import ParameterSpace
from .posterior import coerce_priors
from .priors import LogNormal, Normal, Prior

#: Campaign-wide systematic nuisances beyond the library's ``density_scale``.
EXTRA_NAMES = ("temperature_scale", "b0", "width", "a_bg", "sigma_B")
SYSTEMATIC_NAMES = ("density_scale",) + EXTRA_NAMES
RESONANCE_NAMES = ("b0", "width", "a_bg")

class CampaignSpace(ParameterSpace):
    """:class:`ParameterSpace` extended by the campaign systematics (signs from their priors).

    ``width`` and ``a_bg`` may be negative; each extra parameter keeps the sign of its
    prior's support and is sampled in ln|value| like every other parameter.
    """

    def __init__(self, free, priors, fixed=None, tie=None, correlated=None):
        free = list(free)
        fixed = dict(fixed or {})
        extra = [n for n in free if n in EXTRA_NAMES]
        self.fixed_systematics = {n: float(fixed.pop(n)) for n in list(fixed) if n in EXTRA_NAMES}
        super().__init__([n for n in free if n not in EXTRA_NAMES], priors, fixed=fixed, tie=tie)
        for n in extra:
            if not isinstance(priors.get(n), Prior):
                raise LossfitValueError("systematics", f"needs a Prior for {n!r}, got {priors.get(n)!r}")
        self.names = self.names + extra
        self.priors = self.priors + [priors[n] for n in extra]
        self.ndim = len(self.names)
        self._signs = np.array([-1.0 if n == "a_minus" else p.sign for n, p in zip(self.names, self.priors)])
        self._correlated = None
        if correlated is not None:
            names, mean, cov = correlated
            idx = np.array([self.names.index(n) for n in names])
            sd = np.sqrt(np.diag(cov))
            # the joint Normal replaces the product of its Normal marginals: add
            # log N(x; mean, cov) - sum_i log N(x_i; mean_i, sd_i)
            const = -0.5 * np.linalg.slogdet(cov)[1] + float(np.sum(np.log(sd)))
            self._correlated = (idx, np.asarray(mean, dtype=float), np.linalg.inv(cov), sd, const)

    def log_prior(self, theta):
        """log prior of one point (ndim,), or one per row of (W, ndim)."""
        lp = super().log_prior(theta)
        if self._correlated is None:
            return lp
        idx, mean, inv, sd, const = self._correlated
        theta = np.asarray(theta, dtype=float)
        d = self._signs[idx] * np.exp(theta[..., idx]) - mean
        if theta.ndim == 1:
            if lp == -math.inf:
                return lp
            return lp - 0.5 * float(d @ inv @ d) + 0.5 * float(np.sum((d / sd) ** 2)) + const
        joint = np.einsum("wi,ij,wj->w", d, inv, d)
        return np.where(np.isfinite(lp), lp - 0.5 * joint + 0.5 * np.sum((d / sd) ** 2, axis=1) + const, -math.inf)

    def physical(self, theta):
        return self._signs * np.exp(np.asarray(theta, dtype=float))

    def values(self, theta):
        """Dict name -> value of every parameter; for theta (W, ndim) the free values are
        arrays of W walkers."""
        out = dict(self.fixed)
        out.update(self.fixed_systematics)
        theta = np.asarray(theta, dtype=float)
        if theta.ndim == 2:
            for i, (name, sign) in enumerate(zip(self.names, self._signs)):
                out[name] = sign * np.exp(theta[:, i])
            return out
        for name, sign, t in zip(self.names, self._signs, theta):
            out[name] = sign * math.exp(t)
        return out


def systematic_priors(systematics, resonance):
    """Turn the ``systematics`` shorthand into Priors (docstring of fit_curves).

    Returns the priors and the correlated resonance block (names, mean, covariance) or None.
    """
    out = {}
    systematics = dict(systematics or {})
    correlated = None
    if "resonance" in systematics:
        spec = systematics.pop("resonance")
        clash = [n for n in RESONANCE_NAMES if n in systematics]
        if clash:
            raise LossfitValueError("systematics['resonance']", f"samples b0, width and a_bg jointly; "
                                    f"do not also give {clash}")
        if resonance is None:
            raise LossfitValueError("resonance", "systematics['resonance'] needs the nominal resonance=")
        if spec is True:
            if resonance.covariance is None:
                raise LossfitValueError("systematics['resonance']", "the resonance carries no covariance; "
                                        "pass a 3x3 covariance of (b0, width, a_bg) instead of True")
            cov = resonance.covariance
        else:
            cov = resonance_covariance(spec)
        cov = np.array(cov, dtype=float)
        if np.any(np.diag(cov) <= 0) or np.linalg.eigvalsh(cov).min() <= 1e-12 * np.max(np.diag(cov)):
            raise LossfitValueError("systematics['resonance']", "the covariance must be positive definite "
                                    "(every resonance parameter uncertain)")
        mean = np.array([getattr(resonance, n) for n in RESONANCE_NAMES])
        for n, mu, var in zip(RESONANCE_NAMES, mean, np.diag(cov)):
            out[n] = Normal(float(mu), math.sqrt(var))
        correlated = (RESONANCE_NAMES, mean, cov)
    for name, spec in systematics.items():
        if name not in SYSTEMATIC_NAMES:
            raise LossfitValueError("systematics", f"unknown systematic {name!r}; known: {list(SYSTEMATIC_NAMES)}")
        if isinstance(spec, Prior):
            out[name] = spec
            continue
        if name == "sigma_B":
            if isinstance(spec, (tuple, list)) and len(spec) == 2:
                out[name] = coerce_priors({name: tuple(spec)})[name]
                continue
            raise LossfitValueError("systematics['sigma_B']", "give a Prior or a (lo, hi) range in G")
        if not (isinstance(spec, (int, float)) and math.isfinite(spec) and spec > 0):
            raise LossfitValueError(f"systematics[{name!r}]", f"must be a Prior or a positive width, got {spec!r}")
        if name in ("density_scale", "temperature_scale"):
            out[name] = LogNormal(1.0, float(spec))
        else:
            if resonance is None:
                raise LossfitValueError("resonance", f"systematic {name!r} needs the nominal resonance=")
            out[name] = Normal(getattr(resonance, name), float(spec))
    return out, correlated

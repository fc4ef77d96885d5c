"""The fit's parameter space: names, sampling coordinates, priors and the Efimov set.

Names: the six Efimov parameters ``a_minus, eta_minus, a_star, eta_star, a_plus,
eta_plus``; ``eta`` for one inelasticity shared by every feature; the nuisance
``density_scale`` (the ratio of the density calibration used for the data to the true
density: measured L3 = L3_true / s^2 and measured beta = beta_true / s, since L3 is
inferred through ∫n^3 ∝ n^2 N and beta through ∫n_A n_D ∝ n N_D). With
``tie="universal"`` only ``a_minus`` and ``eta`` are physical parameters and a*, a_+
follow from the zero-range relations (:meth:`lossfit.Efimov.universal`).
"""

__all__ = ["ParameterSpace", "EFIMOV_NAMES", "UNITS"]

import math

import numpy as np

from ..constants import KAPPA_A_MINUS, KAPPA_A_PLUS, KAPPA_A_STAR, SCALING_FACTOR
from ..efimov import Efimov
from ..errors import LossfitValueError
from .priors import LogNormal, LogUniform, Normal, Prior, Uniform

EFIMOV_NAMES = ("a_minus", "eta_minus", "a_star", "eta_star", "a_plus", "eta_plus")
NUISANCE_NAMES = ("density_scale",)
UNITS = {"a_minus": "a0", "a_star": "a0", "a_plus": "a0", "eta_minus": "", "eta_star": "",
         "eta_plus": "", "eta": "", "density_scale": "", "temperature_scale": "", "b0": "G",
         "width": "G", "a_bg": "a0", "sigma_B": "G"}
SIGNS = {"a_minus": -1.0}
DEFAULT_ETA_PRIOR = (0.005, 2.0)


class ParameterSpace:
    """Free parameters with their priors, fixed values and the tie between features.

    Parameters
    ----------
    free : sequence of str
        Names to sample (module docstring).
    priors : dict name -> Prior
        Prior of every free name (defaults must be filled in by the caller).
    fixed : dict name -> float, optional
        Values of Efimov parameters that are not sampled.
    tie : {None, "universal"}
    """

    def __init__(self, free, priors, fixed=None, tie=None):
        free = list(free)
        fixed = dict(fixed or {})
        allowed = set(EFIMOV_NAMES) | {"eta"} | set(NUISANCE_NAMES)
        if tie not in (None, "universal"):
            raise LossfitValueError("tie", f"must be None or 'universal', got {tie!r}")
        if tie == "universal":
            allowed = {"a_minus", "eta"} | set(NUISANCE_NAMES)
        if not free:
            raise LossfitValueError("free", "name at least one parameter to fit")
        for name in free:
            if name not in allowed:
                raise LossfitValueError("free", f"unknown or disallowed parameter {name!r} "
                                        f"(tie={tie!r}); allowed: {sorted(allowed)}")
        if len(set(free)) != len(free):
            raise LossfitValueError("free", f"lists a parameter twice: {free}")
        if "eta" in free and any(n.startswith("eta_") for n in free):
            raise LossfitValueError("free", "use either the shared 'eta' or the separate eta_* parameters")
        for name, value in fixed.items():
            if name not in allowed | set(EFIMOV_NAMES):
                raise LossfitValueError("fixed", f"unknown parameter {name!r}")
            if name in free:
                raise LossfitValueError("fixed", f"{name!r} is both free and fixed")
            if not (isinstance(value, (int, float)) and math.isfinite(value)):
                raise LossfitValueError(f"fixed[{name!r}]", f"must be a finite number, got {value!r}")
        for name in free:
            if not isinstance(priors.get(name), Prior):
                raise LossfitValueError("priors", f"needs a Prior for {name!r}, got {priors.get(name)!r}")
            want = SIGNS.get(name, 1.0)
            if priors[name].sign != want:
                side = "negative" if want < 0 else "positive"
                raise LossfitValueError(f"priors[{name!r}]", f"support must be {side}")
        self.names = free
        self.priors = [priors[n] for n in free]
        self.fixed = fixed
        self.tie = tie
        # validate the fixed values through the public constructor once
        Efimov(**{k: v for k, v in fixed.items() if k in EFIMOV_NAMES})
        self.ndim = len(free)

    def physical(self, theta):
        """Physical values of a theta vector (or an array of them, last axis = parameters)."""
        signs = np.array([SIGNS.get(n, 1.0) for n in self.names])
        return signs * np.exp(np.asarray(theta, dtype=float))

    def theta(self, values):
        """Sampling coordinates of physical values."""
        return np.log(np.abs(np.asarray(values, dtype=float)))

    def log_prior(self, theta):
        """log prior density in theta of one point (ndim,), or one per row of (W, ndim)."""
        theta = np.asarray(theta, dtype=float)
        if theta.ndim == 2:
            total = np.zeros(theta.shape[0])
            for i, prior in enumerate(self.priors):
                total += prior.log_density_theta_many(theta[:, i])
            return total
        total = 0.0
        for prior, t in zip(self.priors, theta):
            lp = prior.log_density_theta(t)
            if lp == -math.inf:
                return -math.inf
            total += lp
        return total

    def values(self, theta):
        """Dict name -> physical value of every named parameter (free and fixed); for
        theta of shape (W, ndim) the free values are arrays of W walkers."""
        out = dict(self.fixed)
        theta = np.asarray(theta, dtype=float)
        if theta.ndim == 2:
            for i, name in enumerate(self.names):
                out[name] = SIGNS.get(name, 1.0) * np.exp(theta[:, i])
            return out
        for name, t in zip(self.names, theta):
            out[name] = SIGNS.get(name, 1.0) * math.exp(t)
        return out

    def efimov(self, values):
        """The Efimov parameter set for a values dict (no validation: priors keep domains)."""
        vals = {k: v for k, v in values.items() if k in EFIMOV_NAMES}
        eta = values.get("eta")
        if self.tie == "universal":
            a_minus = values["a_minus"]
            eta = eta if eta is not None else values.get("eta_minus")
            kappa = KAPPA_A_MINUS / a_minus
            vals = {"a_minus": a_minus, "eta_minus": eta,
                    "a_star": KAPPA_A_STAR * SCALING_FACTOR / kappa, "eta_star": eta,
                    "a_plus": KAPPA_A_PLUS / kappa, "eta_plus": eta}
        elif eta is not None:
            for name in ("eta_minus", "eta_star", "eta_plus"):
                vals.setdefault(name, eta)
        return Efimov.trusted(**vals)

    def density_scale(self, values):
        return values.get("density_scale", 1.0)

    def eta_floor(self):
        """The smallest inelasticity the sampler can reach: the lower edge of every eta
        prior (eight widths below the median for unbounded priors) and fixed etas."""
        floors = [float(v) for n, v in self.fixed.items() if n.startswith("eta")]
        for name, prior in zip(self.names, self.priors):
            if not name.startswith("eta"):
                continue
            if isinstance(prior, (LogUniform, Uniform)):
                floors.append(prior.lo)
            elif isinstance(prior, LogNormal):
                floors.append(prior.median * math.exp(-8.0 * prior.sigma))
            elif isinstance(prior, Normal):
                floors.append(max(abs(prior.mu) - 8.0 * prior.sigma, 1e-3 * abs(prior.mu)))
            else:
                floors.append(1e-4)      # a user's own prior: a floor well below the default range
        return min(floors) if floors else math.inf


# per kind of data: the sign of a where its resonance lies and the power of a in its
# threshold law (L3 ~ a^4 at a < 0, beta ~ a at a > 0)
_RESONANCE_SIDE = {"l3": (-1.0, 4), "beta": (1.0, 1)}


def first_period_window(spectra, period, kind="l3", sign=None, minimum=False):
    """|a| range (a0) of one Efimov period around the first loss resonance in the data.

    Where features repeat every ``period`` in |a| (two bosons and a third atom), a_- and a*
    are defined only up to a power of the period; lossfit samples the resonance of the
    lowest |a| the data show. Among the points of ``kind`` on the resonance's side ("l3":
    L3 at a < 0 for a_-; "beta": beta at a > 0 for a*) within one period of the smallest
    measured |a|, the one with the largest value/|a|^p (the threshold law's power divided
    out, p = 4 for L3 and 1 for beta, so that the Efimov modulation stands out) locates it;
    the window is that |a| times period^(-1/2)..period^(1/2). ``sign`` (+1 or -1) overrides
    the side and ``minimum`` takes the smallest value/|a|^p instead (L3 at a > 0 for a
    mixture's a_+, the recombination minimum).
    """
    side_sign, power = _RESONANCE_SIDE[kind]
    sign = side_sign if sign is None else sign
    a = np.concatenate([s.a for s in spectra if s.kind == kind])
    value = np.concatenate([s.value for s in spectra if s.kind == kind])
    side = a * sign > 0
    a, value = np.abs(a[side]), value[side]
    first = a <= a.min() * period
    scaled = value[first] / a[first] ** power
    peak = a[first][np.argmin(scaled) if minimum else np.argmax(scaled)]
    return peak / math.sqrt(period), peak * math.sqrt(period)


def default_priors(free, spectra, density_sigma=None, period=None):
    """Default priors: log-uniform lengths over the measured range of |a| on the
    relevant side of the resonance, log-uniform eta in [0.005, 2], and a log-normal
    density scale of width ``density_sigma``. With ``period`` (the discrete scaling factor
    of a system whose fit range spans several Efimov periods) a_- and, with beta data, a*
    are log-uniform over one period (:func:`first_period_window`)."""
    pos = np.concatenate([s.a[s.a > 0] for s in spectra] or [np.array([])])
    neg = np.concatenate([-s.a[s.a < 0] for s in spectra] or [np.array([])])
    out = {}
    for name in free:
        side = neg if name == "a_minus" else pos
        if name in ("a_minus", "a_star", "a_plus") and np.unique(side).size == 1:
            raise LossfitValueError("priors", f"{name}'s default prior spans the measured |a| range on its side, "
                                    f"but the data have a single |a| there ({side[0]:g} a0): give a prior, e.g. "
                                    f"priors={{'{name}': ({'-' if name == 'a_minus' else ''}{side[0] / 3:g}, "
                                    f"{'-' if name == 'a_minus' else ''}{side[0] * 3:g})}}")
        if name == "a_minus":
            if neg.size == 0:
                raise LossfitValueError("free", "a_minus is free but no data point has a < 0")
            if period is None:
                out[name] = LogUniform(-neg.min(), -neg.max())
            else:
                low, high = first_period_window(spectra, period)
                out[name] = LogUniform(-low, -high)
        elif name == "a_star" and period is not None and any((s.kind == "beta") & (s.a > 0).any()
                                                               for s in spectra):
            out[name] = LogUniform(*first_period_window(spectra, period, kind="beta"))
        elif name == "a_plus" and period is not None and any((s.kind == "l3") & (s.a > 0).any() for s in spectra):
            # a_+ is the minimum of a > 0 recombination (the zero of the shallow channel as
            # eta -> 0, docs/heteronuclear-rates.md): one period around the first minimum of L3/a^4
            out[name] = LogUniform(*first_period_window(spectra, period, kind="l3", sign=1.0, minimum=True))
        elif name in ("a_star", "a_plus"):
            if pos.size == 0:
                raise LossfitValueError("free", f"{name} is free but no data point has a > 0")
            out[name] = LogUniform(pos.min(), pos.max())
        elif name.startswith("eta"):
            out[name] = LogUniform(*DEFAULT_ETA_PRIOR)
        elif name == "density_scale":
            if density_sigma is None:
                raise LossfitValueError("density_scale", "give its prior width (e.g. density_sigma=0.2) "
                                        "or a prior in priors['density_scale']")
            out[name] = LogNormal(1.0, density_sigma)
    return out

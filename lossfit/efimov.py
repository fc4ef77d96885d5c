"""The Efimov parameter set of zero-range theory for three identical bosons.

a_-, a*, a_+ (feature positions in a0) and the inelasticity eta of each feature;
:meth:`Efimov.universal` ties them to one three-body parameter kappa* with the
zero-range relations of :mod:`lossfit.constants`.
"""

__all__ = ["Efimov"]

import dataclasses
import math

import numpy as np

from .constants import KAPPA_A_MINUS, KAPPA_A_PLUS, KAPPA_A_STAR, SCALING_FACTOR
from .errors import LossfitValueError, is_real


def _check_eta(name, value):
    if value is None:
        return None
    if not (is_real(value) and math.isfinite(value) and value > 0):
        raise LossfitValueError(name, f"must be a positive finite number, got {value!r}")
    return float(value)


def _check_length(name, value, sign):
    if value is None:
        return None
    if not (is_real(value) and math.isfinite(value)) or value * sign <= 0:
        want = "negative" if sign < 0 else "positive"
        raise LossfitValueError(name, f"must be a {want} finite scattering length in a0, got {value!r}")
    return float(value)


@dataclasses.dataclass(frozen=True)
class Efimov:
    """Efimov parameters of zero-range theory for three identical bosons.

    Any subset may be given; a law that needs a missing parameter raises.

    Parameters
    ----------
    a_minus : float, optional
        Scattering length (a0, < 0) of the three-atom resonance.
    eta_minus : float, optional
        Inelasticity parameter eta (> 0) used for a < 0.
    a_star : float, optional
        Scattering length (a0, > 0) of the atom-dimer resonance.
    eta_star : float, optional
        Inelasticity parameter used for atom-dimer relaxation.
    a_plus : float, optional
        Scattering length (a0, > 0) of the recombination minimum.
    eta_plus : float, optional
        Inelasticity parameter used for three-body recombination at a > 0.
    """

    a_minus: float = None
    eta_minus: float = None
    a_star: float = None
    eta_star: float = None
    a_plus: float = None
    eta_plus: float = None

    def __post_init__(self):
        checks = {"a_minus": lambda v: _check_length("a_minus", v, -1),
                  "a_star": lambda v: _check_length("a_star", v, +1),
                  "a_plus": lambda v: _check_length("a_plus", v, +1),
                  "eta_minus": lambda v: _check_eta("eta_minus", v),
                  "eta_star": lambda v: _check_eta("eta_star", v),
                  "eta_plus": lambda v: _check_eta("eta_plus", v)}
        for name, check in checks.items():
            object.__setattr__(self, name, check(getattr(self, name)))

    @classmethod
    def universal(cls, a_minus, eta):
        """All features tied to one three-body parameter kappa* by zero-range relations.

        kappa* a_- = -1.50763, kappa* a*_0 = 0.0707645 (Gogolin, Mora & Egger,
        PRL 100, 140404 (2008); Braaten & Hammer 2006), so the atom-dimer resonance of
        the next branch is a* = 1.0652 |a_-|; kappa* a_+ = 0.316472 (the project's
        solver, docs/stm.md). One eta serves every feature.

        Parameters
        ----------
        a_minus : float
            Three-atom resonance position in a0 (< 0).
        eta : float
            Inelasticity parameter (> 0).
        """
        a_minus = _check_length("a_minus", a_minus, -1)
        eta = _check_eta("eta", eta)
        kappa = KAPPA_A_MINUS / a_minus          # in 1/a0, > 0
        return cls(a_minus=a_minus, eta_minus=eta,
                   a_star=KAPPA_A_STAR * SCALING_FACTOR / kappa, eta_star=eta,
                   a_plus=KAPPA_A_PLUS / kappa, eta_plus=eta)

    @classmethod
    def trusted(cls, **values):
        """An Efimov set built without validation, for values already known to lie in
        their domains (a sampler's priors keep them there). Values may be arrays of W
        walkers, one entry per walker, to evaluate many sets in one call."""
        ef = object.__new__(cls)
        for field in dataclasses.fields(cls):
            object.__setattr__(ef, field.name, values.get(field.name))
        return ef

    @property
    def n_walkers(self):
        """Walkers this set holds: 0 for floats, W when its parameters are arrays of W."""
        # walker arrays are numpy arrays (Efimov.trusted); floats and None are not
        return max((v.size for v in vars(self).values() if isinstance(v, np.ndarray) and v.ndim), default=0)

    def walkers(self):
        """The sets of a walker-array Efimov (see :meth:`trusted`) one by one, as floats."""
        count = self.n_walkers
        if not count:
            return [self]
        columns = {k: np.broadcast_to(np.asarray(v, dtype=float), (count,))
                   for k, v in vars(self).items() if v is not None}
        return [Efimov.trusted(**{k: float(c[w]) for k, c in columns.items()}) for w in range(count)]

    def each_walker(self, evaluate):
        """``evaluate(efimov)`` for a set of floats; for walker arrays, applied walker by
        walker and stacked on a first axis (for paths without a many-walker form)."""
        if not self.n_walkers:
            return evaluate(self)
        return np.array([evaluate(one) for one in self.walkers()])

    def with_atom_dimer(self):
        """These parameters, with a* and eta* tied to a_+ and eta_+ by the zero-range
        relations (one kappa*: a* = kappa* a*_0 x scaling / kappa*, kappa* = 0.316472/a_+;
        eta* = eta_+) where they are not set. The observed three-body loss at a > 0 needs
        atom-dimer relaxation, and a fit of a_+ alone does not set a* (docs/conventions.md)."""
        if self.a_star is not None and self.eta_star is not None:
            return self
        if self.a_plus is None or self.eta_plus is None:
            return self
        a_star = self.a_star if self.a_star is not None else KAPPA_A_STAR * SCALING_FACTOR * self.a_plus / KAPPA_A_PLUS
        eta_star = self.eta_star if self.eta_star is not None else self.eta_plus
        # derived from validated (or trusted walker-array) values: no second validation
        return Efimov.trusted(**dict(dataclasses.asdict(self), a_star=a_star, eta_star=eta_star))

    def replace(self, **changes):
        """A copy with some parameters changed."""
        return dataclasses.replace(self, **changes)

    def require(self, *names):
        """Return the named parameters, raising a clear error for any that are missing."""
        missing = [n for n in names if getattr(self, n) is None]
        if missing:
            raise LossfitValueError("efimov", f"this calculation needs {', '.join(missing)}, "
                                    f"which the Efimov parameters {self} do not set")
        return tuple(getattr(self, n) for n in names)

    def as_dict(self):
        """Parameters that are set, as a dict."""
        return {k: v for k, v in dataclasses.asdict(self).items() if v is not None}

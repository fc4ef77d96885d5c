"""Gaussian likelihood of loss spectra under a thermally averaged rate model.

Everything that does not depend on the fit parameters (the thermal wavenumber of
each point, unit factors, the data) is computed once; one evaluation then costs one
threshold-coefficient pass and one thermal quadrature per point.
"""

__all__ = ["SpectrumLikelihood"]

import math

import numpy as np

from ..constants import HBAR
from ..errors import LossfitValueError
from ..species import species as _species
from ..thermal import ATOM_DIMER, THREE_BODY, averager
from ..units import A0, CM3_PER_S, CM6_PER_S, NK
from ..universal.models import get_model, scale_wavenumber_a0
from ..data import LossSpectrum


class _Block:
    """All points of one kind (L3 or beta), prepared for repeated evaluation."""

    def __init__(self, spectra, sp, model):
        self.kind = spectra[0].kind
        self.sizes = [len(s) for s in spectra]
        self.a = np.concatenate([s.a for s in spectra])
        temperature = np.concatenate([s.temperature for s in spectra])
        k_s = scale_wavenumber_a0(temperature * NK, sp.mass)      # 1/a0
        self.q = self.a * k_s
        k_si = k_s / A0
        if self.kind == "l3":
            self.unit = HBAR / (sp.mass * k_si ** 4) / CM6_PER_S
            self.rows = model.three_body_rows
            self.run = averager(model.three_body_kernel, model.three_body_features)
            self.weight, self.density_power = THREE_BODY, 2.0
        else:
            self.unit = HBAR / (sp.mass * k_si) / CM3_PER_S
            self.rows = model.atom_dimer_rows
            self.run = averager(model.atom_dimer_kernel, model.atom_dimer_features)
            self.weight, self.density_power = ATOM_DIMER, 1.0
        self.value = np.concatenate([s.value for s in spectra])
        self.inv_error = 1.0 / np.concatenate([s.error for s in spectra])
        self.out = np.empty(self.a.size)
        self.err = np.empty(self.a.size)
        self.model = model

    def __getstate__(self):
        # The compiled closure is rebuilt where the block is unpickled (pool workers).
        state = dict(self.__dict__)
        del state["run"], state["rows"]
        return state

    def __setstate__(self, state):
        self.__dict__.update(state)
        m = self.model
        self.rows = m.three_body_rows if self.kind == "l3" else m.atom_dimer_rows
        self.run = averager(*((m.three_body_kernel, m.three_body_features) if self.kind == "l3"
                              else (m.atom_dimer_kernel, m.atom_dimer_features)))

    def predict(self, efimov, rtol):
        params = self.rows(self.a, efimov, self.q)
        self.run(params, self.weight, rtol, self.out, self.err)
        return self.out * self.unit


class SpectrumLikelihood:
    """log L of several spectra (any mix of L3 and beta, temperatures and sides).

    Parameters
    ----------
    spectra : sequence of LossSpectrum
    species : Species or str
    model : str or EnergyModel
    rtol : float
        Thermal quadrature tolerance.
    """

    def __init__(self, spectra, species, model, rtol=1e-7):
        spectra = [spectra] if isinstance(spectra, LossSpectrum) else list(spectra)
        if not spectra or not all(isinstance(s, LossSpectrum) for s in spectra):
            raise LossfitValueError("data", "must be one or more LossSpectrum objects")
        self.species = _species(species)
        self.model = get_model(model)
        self.rtol = rtol
        self.spectra = spectra
        # Points of one kind share a kernel: one quadrature call serves all of them.
        self.blocks = [_Block([s for s in spectra if s.kind == kind], self.species, self.model)
                       for kind in ("l3", "beta") if any(s.kind == kind for s in spectra)]
        self.n_points = sum(len(s) for s in spectra)

    def predict(self, efimov, density_scale=1.0):
        """Model values at every data point as the data would report them: one array per spectrum."""
        per_kind = {b.kind: np.split(b.predict(efimov, self.rtol) / density_scale ** b.density_power,
                                     np.cumsum(b.sizes)[:-1]) for b in self.blocks}
        counters = {kind: iter(arrs) for kind, arrs in per_kind.items()}
        return [next(counters[s.kind]) for s in self.spectra]

    def given_values(self, efimov, values):
        """log L for the Efimov set and a dict of every parameter value (nuisances)."""
        return self(efimov, values.get("density_scale", 1.0))

    def __call__(self, efimov, density_scale=1.0):
        total = 0.0
        for b in self.blocks:
            pred = b.predict(efimov, self.rtol) / density_scale ** b.density_power
            z = (b.value - pred) * b.inv_error
            total -= 0.5 * float(np.dot(z, z))
        return total if math.isfinite(total) else -math.inf

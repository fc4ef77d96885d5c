"""Gaussian likelihood of loss spectra under a thermally averaged rate model.

Everything that does not depend on the fit parameters (each point's thermal
wavenumber and unit factor, the quadrature weights and table values of the exact
model, the data) is prepared once in a :class:`RateBlock`; one evaluation then costs a
pass over the prepared quadrature nodes (lossfit.universal.averages).
"""

__all__ = ["SpectrumLikelihood", "RateBlock", "PreparedPlanCache"]

import math

import numba
import numpy as np

from ..data.spectra import LossSpectrum
from ..dimer_kinetics import DEFAULT_DEPTH_OVER_T
from ..errors import LossfitValueError
from ..mixture import HeteronuclearSystem
from ..rates import natural_unit
from ..thermal import ATOM_DIMER, THREE_BODY
from ..units import NK
from ..universal.averages import ETA_MIN
from ..universal.mixture_model import resolve_model, resolve_species
from ..universal.models import OBSERVED, channel_at_negative_a, get_model, scale_wavenumber_a0
from .fit_checks import goodness_of_fit, input_plausibility, poor_fit_message


class PreparedPlanCache:
    """Base of blocks that hold a prepared thermal-average plan: ``eta_min`` (setting it
    discards the plan) and pickling without the plan (rebuilt where a pool worker
    unpickles the block). Subclasses build ``self._plan`` on demand."""

    _plan = None

    @property
    def eta_min(self):
        """Smallest eta the prepared averages resolve (setting it discards them)."""
        return self._eta_min

    @eta_min.setter
    def eta_min(self, value):
        self._eta_min = float(value)
        self._plan = None

    def __getstate__(self):
        # the plan's arrays are rebuilt where the block is unpickled (pool workers)
        return {k: v for k, v in self.__dict__.items() if k != "_plan"}

    def __setstate__(self, state):
        self.__dict__.update(state)
        self._plan = None


class RateBlock(PreparedPlanCache):
    """Thermal L3 or beta at fixed points (a, T), prepared for repeated evaluation.

    Parameters
    ----------
    kind : {"l3", "beta"}
    a, temperature : ndarray
        Scattering lengths (a0) and temperatures (nK), 1-D.
    species : Species
    model : EnergyModel
    eta_min : float
        Smallest eta the sampler can reach (the exact model's rules resolve it).
    rtol : float, optional
        None: the model's fast averages. A number: the adaptive reference quadrature
        at this tolerance at every evaluation (slow; for checks).
    channel : str, optional
        The loss channel (None: the model's default, ``"observed"`` for L3 with the
        zero-range model, ``"relaxation"`` for beta).
    trap_depth : ndarray, optional
        Atom trap depth U/k_B in nK per point for the observed channel; NaN or None:
        10 k_B T (:data:`lossfit.dimer_kinetics.DEFAULT_DEPTH_OVER_T`).
    temperature_x : ndarray, optional
        Two identical bosons and a third atom: the third atom's temperature in nK per
        point; NaN or None: that of the bosons.
    """

    def __init__(self, kind, a, temperature, species, model, eta_min=ETA_MIN, rtol=None, channel=None,
                 trap_depth=None, temperature_x=None):
        self.kind = kind
        self.process = THREE_BODY if kind == "l3" else ATOM_DIMER
        self.a = np.asarray(a, dtype=float)
        temperature = np.asarray(temperature, dtype=float)
        self.k_s = scale_wavenumber_a0(temperature * NK, species.mass)   # 1/a0
        self.unit = natural_unit(self.process, temperature, species.mass)
        model = get_model(model)
        if self.process == THREE_BODY:
            self.channel = model.resolve_channel(channel)
        else:
            self.channel = channel or "relaxation"
        depth = np.full(self.a.shape, np.nan) if trap_depth is None else np.asarray(trap_depth, dtype=float)
        self.depth_over_t = np.where(np.isnan(depth), DEFAULT_DEPTH_OVER_T, depth / temperature)
        self.density_power = 2.0 if kind == "l3" else 1.0
        self.temperature_ratio = None
        if temperature_x is not None and not np.isnan(temperature_x).all():
            if rtol is not None:
                raise LossfitValueError("rtol", "the reference path averages at one temperature; data with "
                                        "temperature_x need rtol=None")
            self.temperature_ratio = np.where(np.isnan(temperature_x), 1.0, temperature_x / temperature)
        self.model = model
        self.rtol = rtol
        self.eta_min = eta_min

    @property
    def plan(self):
        if self._plan is None:
            self._plan = self._make_plan(self.a, self.eta_min)
        return self._plan

    def _make_plan(self, a, eta_min, rtol=None):
        q = a * self.k_s
        if self.channel == OBSERVED and (a > 0).any():
            return self.model.observed_plan(a, q, self.unit, self.depth_over_t, eta_min=eta_min, rtol=rtol)
        if rtol is not None:
            return None
        if self.process == THREE_BODY:
            # only a < 0 points reach here with the observed channel; a third atom's own
            # temperature only with a mixture model (checked by SpectrumLikelihood)
            extra = {} if self.temperature_ratio is None else {"temperature_ratio": self.temperature_ratio}
            return self.model.three_body_plan(a, q, self.unit, channel=channel_at_negative_a(self.channel),
                                              eta_min=eta_min, **extra)
        return self.model.atom_dimer_plan(a, q, self.unit, channel=self.channel, eta_min=eta_min)

    def predict(self, efimov, a=None):
        """L3 (cm^6/s) or beta (cm^3/s) at every point, shape (n_points,), or (W, n_points)
        for an Efimov set of W walker arrays (:meth:`lossfit.Efimov.trusted`); ``a`` (a0)
        replaces the stored scattering lengths (then nothing prepared is reused)."""
        if self.rtol is not None:
            return self._reference(efimov, self.a if a is None else np.asarray(a, dtype=float))
        if a is None:
            return self.plan.evaluate(efimov)
        a = np.asarray(a, dtype=float)
        if self.channel == OBSERVED:
            return self._make_plan(a, self.eta_min).evaluate(efimov)
        return efimov.each_walker(lambda one: self.model.thermal(self.process, a, a * self.k_s, one, self.unit,
                                                                 channel=self.channel))

    def _reference(self, efimov, a):
        plan = self._make_plan(a, self.eta_min, rtol=self.rtol)
        if plan is not None:
            return plan.evaluate(efimov)
        channel = channel_at_negative_a(self.channel)      # only a < 0 points reach here
        return efimov.each_walker(lambda one: self.model.reference_average(self.process, a, a * self.k_s, one,
                                                                           channel, self.rtol)[0] * self.unit)


def _depth_record(spectrum, channel):
    """How the trap depth entered a spectrum's fit (recorded in results)."""
    if channel != OBSERVED:
        return "not used (channel without trap kinetics)"
    if (spectrum.a < 0).all():
        return "not used (a < 0: no shallow dimer)"
    if spectrum.trap_depth is None:
        return f"assumed {DEFAULT_DEPTH_OVER_T:g} k_B T (none given)"
    depth = spectrum.trap_depth
    return f"{depth.min():.4g} nK" if np.ptp(depth) == 0 else f"{depth.min():.4g}-{depth.max():.4g} nK per point"


@numba.njit(cache=True)
def _chi2(value, predicted, factor, inv_error, out):
    # out[w] += sum ((value - factor[w] predicted[w]) / error)^2 for each walker w: one
    # pass instead of four numpy temporaries
    for w in range(predicted.shape[0]):
        total = 0.0
        for i in range(value.size):
            z = (value[i] - factor[w] * predicted[w, i]) * inv_error[i]
            total += z * z
        out[w] += total


class SpectrumLikelihood:
    """log L of several spectra (any mix of L3 and beta, temperatures and sides).

    Parameters
    ----------
    spectra : sequence of LossSpectrum
    species : Species, str or HeteronuclearSystem
    model : str or EnergyModel
    rtol : float, optional
        None (default): the model's fast thermal averages. A number: the adaptive
        reference quadrature at this tolerance (slow; for checks).
    eta_min : float
        Smallest eta the sampler can reach (default: the default prior's lower edge).
    """

    def __init__(self, spectra, species, model, rtol=None, eta_min=ETA_MIN):
        spectra = [spectra] if isinstance(spectra, LossSpectrum) else list(spectra)
        if not spectra or not all(isinstance(s, LossSpectrum) for s in spectra):
            raise LossfitValueError("data", "must be one or more LossSpectrum objects")
        self.species = resolve_species(species)
        self.model = resolve_model(model, self.species)
        if any(s.temperature_x is not None for s in spectra) and not isinstance(self.species, HeteronuclearSystem):
            raise LossfitValueError("data", "spectra with temperature_x (a third atom's temperature) need "
                                    "species=lf.heteronuclear(...)")
        self.rtol = rtol
        self.spectra = spectra
        self.blocks = []
        # Points of one kind and channel share a block: one prepared pass serves them all.
        channels = [self._channel(s) for s in spectra]
        for key in dict.fromkeys(zip((s.kind for s in spectra), channels)):
            members = [i for i, s in enumerate(spectra) if (s.kind, channels[i]) == key]
            sel = [spectra[i] for i in members]
            depth, temperature_x = (np.concatenate([np.full(len(s), np.nan) if getattr(s, name) is None
                                                    else getattr(s, name) for s in sel])
                                    for name in ("trap_depth", "temperature_x"))
            block = RateBlock(key[0], np.concatenate([s.a for s in sel]), np.concatenate([s.temperature for s in sel]),
                              self.species, self.model, eta_min=eta_min, rtol=rtol, channel=key[1], trap_depth=depth,
                              temperature_x=temperature_x)
            block.members = members
            block.sizes = [len(s) for s in sel]
            block.value = np.concatenate([s.value for s in sel])
            block.inv_error = 1.0 / np.concatenate([s.error for s in sel])
            self.blocks.append(block)
        self.n_points = sum(len(s) for s in spectra)
        self.channels = [{"spectrum": i, "label": s.label, "kind": s.kind, "channel": channels[i],
                          "trap_depth": _depth_record(s, channels[i])} for i, s in enumerate(spectra)]

    def _channel(self, spectrum):
        if spectrum.kind == "l3":
            channel = self.model.resolve_channel(spectrum.channel)
            if channel != "total" and not self.model.resolves_channels:
                raise LossfitValueError("channel", f"spectrum {spectrum.label!r} measures the {channel!r} L3, which "
                                        f"model {self.model.name!r} does not resolve; use model='zero-range'")
            return channel
        return spectrum.channel or "relaxation"

    def predict(self, efimov, density_scale=1.0):
        """Model values at every data point as the data would report them: one array per
        spectrum, shape (n,), or (W, n) for an Efimov set of W walker arrays (then
        ``density_scale`` may hold one value per walker)."""
        out = [None] * len(self.spectra)
        scale = np.asarray(density_scale, dtype=float)
        if efimov.n_walkers:
            scale = np.broadcast_to(scale, (efimov.n_walkers,))[:, None]
        for b in self.blocks:
            parts = np.split(b.predict(efimov) / scale ** b.density_power, np.cumsum(b.sizes)[:-1], axis=-1)
            for i, part in zip(b.members, parts):
                out[i] = part
        return out

    #: The log likelihood takes Efimov sets of walker arrays (one call for many walkers).
    vectorized = True

    def given_values(self, efimov, values):
        """log L for the Efimov set and a dict of every parameter value (nuisances); with
        walker arrays (``vectorized``) an array of one log L per walker."""
        return self(efimov, values.get("density_scale", 1.0))

    def predict_values(self, space, values):
        """Model values as the data would report them (one array per spectrum) at a dict of
        every parameter value of ``space``."""
        return self.predict(space.efimov(values), values.get("density_scale", 1.0))

    def fit_check(self, space, kept_theta, median_values):
        """(checks dict, messages) of a finished fit (:mod:`lossfit.inference.fit_checks`)."""
        checks = goodness_of_fit(self, space, kept_theta, median_values)
        messages = input_plausibility(self.spectra, self.species)
        poor = poor_fit_message(checks)
        return checks, messages + ([poor] if poor else [])

    def __call__(self, efimov, density_scale=1.0):
        """log L (float), or one per walker (array) for an Efimov set of walker arrays;
        ``density_scale`` a float or one per walker."""
        walkers = efimov.n_walkers
        if walkers:
            scale = np.broadcast_to(np.asarray(density_scale, dtype=float), (walkers,))
        else:
            scale = np.array([float(density_scale)])
        chi2 = np.zeros(scale.size)
        for b in self.blocks:
            predicted = b.predict(efimov)
            _chi2(b.value, predicted.reshape(scale.size, -1), scale ** -b.density_power, b.inv_error, chi2)
        total = -0.5 * chi2
        total[~np.isfinite(total)] = -math.inf
        return total if walkers else float(total[0])

"""lossfit: thermally averaged zero-range fits of three-body and atom-dimer loss.

Scattering lengths in a0, temperatures and energies in nK, L3 in cm^6/s (atoms lost
from a thermal gas, dN/dt = -L3 ∫n^3), beta in cm^3/s, fields in G, times in s,
trap frequencies in Hz.
"""

import importlib

from . import errors
from ._version import __version__
from .constants import S0, SCALING_FACTOR
from .efimov import Efimov
from .errors import LossfitError, LossfitValueError
from .species import Species, known_species, register_species, species

__all__ = ["__version__", "errors", "S0", "SCALING_FACTOR", "LossfitError", "LossfitValueError",
           "Species", "species", "known_species", "register_species",
           "Efimov", "l3_threshold", "beta_threshold", "convert_l3",
           "EnergyModel", "available_models", "register_model",
           "k3", "beta_energy", "l3", "beta",
           "LossSpectrum", "read_spectra", "write_spectra", "read_csv",
           "fit", "FitResult", "LogUniform", "Uniform", "LogNormal", "Normal",
           "HarmonicTrap", "simulate_decay", "TabulatedRate", "FeshbachResonance",
           "OverlappingResonances", "ScatteringLengthTable", "average_over_field_noise",
           "calibrate_from_binding_energies", "DecayCurve", "write_campaign", "read_campaign",
           "read_curves_csv", "fit_curve", "spectrum_from_curves", "load_result", "trimer_energies", "compare_models",
           "temperature_study", "published_results", "heteronuclear", "HeteronuclearSystem", "scaling_test",
           "simulate_mixture_decay", "fit_mixture_curve"]

# Everything beyond the foundations loads on first use: the rates (numba, ~0.4 s), data
# files and h5py, decay curves and scipy.optimize, the inference layer with emcee
# (together more than a second), so that computing rates starts fast and the command
# line answers --help at once.
_LAZY = {name: "lossfit.inference" for name in
         ("fit", "FitResult", "LogUniform", "Uniform", "LogNormal", "Normal")}
_LAZY.update({name: "lossfit.rates" for name in ("k3", "beta_energy", "l3", "beta")})
_LAZY.update({name: "lossfit.universal.models" for name in ("EnergyModel", "available_models", "register_model")})
_LAZY.update({name: "lossfit.universal.threshold" for name in ("l3_threshold", "beta_threshold", "convert_l3")})
_LAZY.update({name: "lossfit.inference.curve_fits" for name in ("fit_curve", "spectrum_from_curves")})
_LAZY.update({name: "lossfit.data.curves" for name in ("DecayCurve", "read_campaign", "read_curves_csv",
                                                  "write_campaign")})
_LAZY.update({name: "lossfit.data" for name in ("LossSpectrum", "read_csv", "read_spectra", "write_spectra")})
_LAZY.update({name: "lossfit.experiment.decay" for name in ("TabulatedRate", "simulate_decay")})
_LAZY.update({name: "lossfit.experiment.feshbach" for name in ("FeshbachResonance", "OverlappingResonances",
                                                    "ScatteringLengthTable", "average_over_field_noise",
                                                    "calibrate_from_binding_energies")})
_LAZY["HarmonicTrap"] = "lossfit.experiment.trap"
_LAZY.update({name: "lossfit.mixture" for name in ("heteronuclear", "HeteronuclearSystem")})
_LAZY["simulate_mixture_decay"] = "lossfit.experiment.mixture_decay"
_LAZY["fit_mixture_curve"] = "lossfit.inference.mixture_curve_fits"
_LAZY["load_result"] = "lossfit.batch.runner"
_LAZY["trimer_energies"] = "lossfit.universal.spectrum"
_LAZY["compare_models"] = "lossfit.inference.model_comparison"
_LAZY["temperature_study"] = "lossfit.inference.temperature_study"
_LAZY["scaling_test"] = "lossfit.inference.scaling_test"
_LAZY["published_results"] = "lossfit.published"


def __getattr__(name):
    if name in _LAZY:
        value = getattr(importlib.import_module(_LAZY[name]), name)
        globals()[name] = value          # later lookups skip this function
        return value
    raise AttributeError(f"module 'lossfit' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_LAZY))

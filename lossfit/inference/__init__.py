"""Bayesian inference of Efimov parameters: priors, likelihoods, sampling, results."""

from .fitting import fit
from .posterior import Posterior
from .priors import LogNormal, LogUniform, Normal, Prior, Uniform
from .result import FitResult

__all__ = ["fit", "Posterior", "FitResult", "Prior", "LogUniform", "Uniform", "LogNormal", "Normal"]

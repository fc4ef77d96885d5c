"""Figures: :mod:`.spectra` (loss spectra with posterior bands, corner plots) and
:mod:`.curves` (decay curves with the fitted model, spectra derived from curves) and
:mod:`.efimov` (the universal trimer spectrum with the fitted features), :mod:`.studies`
(temperature study, binding-energy calibration) and :mod:`.universality` (a fitted
a_-/r_vdW among the published measurements).
The public names of all of them are re-exported here.
"""

from .curves import curves_plot, derived_spectrum_plot
from .efimov import efimov_spectrum_plot
from .spectra import corner_plot, posterior_bands, save_figure, spectrum_plot
from .studies import binding_energy_plot, temperature_study_plot
from .universality import universality_plot

__all__ = ["corner_plot", "spectrum_plot", "posterior_bands", "save_figure", "curves_plot",
           "derived_spectrum_plot", "efimov_spectrum_plot",
           "temperature_study_plot", "binding_energy_plot", "universality_plot"]

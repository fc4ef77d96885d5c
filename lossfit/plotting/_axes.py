"""Axis formatting and parameter symbols shared by the figures."""

__all__ = ["tidy_log_axis", "SYMBOLS"]

import numpy as np
from matplotlib import ticker

#: Typeset symbols of the parameters.
SYMBOLS = {"a_minus": r"$a_-$", "a_star": r"$a_*$", "a_plus": r"$a_+$", "eta_minus": r"$\eta_-$",
           "eta_star": r"$\eta_*$", "eta_plus": r"$\eta_+$", "eta": r"$\eta$",
           "density_scale": r"density scale", "temperature_scale": r"temperature scale",
           "b0": r"$B_0$", "width": r"$\Delta$", "a_bg": r"$a_\mathrm{bg}$", "sigma_B": r"$\sigma_B$"}


def tidy_log_axis(axis):
    """Label only the 2x and 5x minor ticks of a log axis: by default every minor tick of a
    short log axis is labelled and the labels collide."""
    axis.set_minor_locator(ticker.LogLocator(subs=(2.0, 5.0)))
    axis.set_minor_formatter(ticker.LogFormatterSciNotation(labelOnlyBase=False,
                                                           minor_thresholds=(np.inf, np.inf)))

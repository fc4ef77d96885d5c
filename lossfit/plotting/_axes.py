"""Axis formatting shared by the figures."""

__all__ = ["tidy_log_axis"]

import numpy as np
from matplotlib import ticker


def tidy_log_axis(axis):
    """Label only the 2x and 5x minor ticks of a log axis: by default every minor tick of a
    short log axis is labelled and the labels collide."""
    axis.set_minor_locator(ticker.LogLocator(subs=(2.0, 5.0)))
    axis.set_minor_formatter(ticker.LogFormatterSciNotation(labelOnlyBase=False,
                                                           minor_thresholds=(np.inf, np.inf)))

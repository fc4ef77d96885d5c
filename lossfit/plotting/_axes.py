"""Axis formatting, parameter symbols, feature colours and labels shared by the figures."""

__all__ = ["tidy_log_axis", "PlainLogFormatter", "SYMBOLS", "FEATURE_COLOURS", "feature_intervals",
           "temperature_label", "grid_in_inches"]

import math

from matplotlib import ticker

from ..inference.result import FEATURES

#: Typeset symbols of the parameters.
SYMBOLS = {"a_minus": r"$a_-$", "a_star": r"$a_*$", "a_plus": r"$a_+$", "eta_minus": r"$\eta_-$",
           "eta_star": r"$\eta_*$", "eta_plus": r"$\eta_+$", "eta": r"$\eta$",
           "density_scale": r"density scale", "temperature_scale": r"temperature scale",
           "b0": r"$B_0$", "width": r"$\Delta$", "a_bg": r"$a_\mathrm{bg}$", "sigma_B": r"$\sigma_B$"}

#: Colour of each Efimov feature wherever a figure marks it.
FEATURE_COLOURS = {"a_minus": "C3", "a_star": "C2", "a_plus": "C4"}

# Axes spanning more decades than this label only the decades (as 10^n): with the 2x and
# 5x ticks labelled too their labels would run into each other.
_PLAIN_MAX_DECADES = 2.2


class PlainLogFormatter(ticker.Formatter):
    """Tick labels of a log axis as plain numbers (200, 500, 1000, 2000, ...) on axes of
    up to about two decades; on longer axes only the decades are labelled, as 10^n.

    matplotlib's default would write the 2x and 5x ticks as 2×10², 5×10², which a
    reader has to decode on an axis of scattering lengths or temperatures.
    """

    def __call__(self, x, pos=None):
        if not (x > 0 and math.isfinite(x)):
            return ""
        lo, hi = sorted(abs(v) for v in self.axis.get_view_interval())
        exponent = math.floor(math.log10(x) + 1e-9)
        mantissa = x / 10.0 ** exponent
        if lo > 0 and math.log10(hi / lo) > _PLAIN_MAX_DECADES:
            return f"$10^{{{exponent}}}$" if abs(mantissa - 1.0) < 1e-6 else ""
        return f"{x:.{max(0, -exponent)}f}"


def tidy_log_axis(axis):
    """Ticks at 1, 2 and 5 times the powers of ten, labelled as plain numbers
    (:class:`PlainLogFormatter`): by default every minor tick of a short log axis is
    labelled in exponent notation and the labels collide."""
    axis.set_minor_locator(ticker.LogLocator(subs=(2.0, 5.0)))
    axis.set_major_formatter(PlainLogFormatter())
    axis.set_minor_formatter(PlainLogFormatter())


def grid_in_inches(fig, nrows, ncols, *, left, right, bottom, top, wspace, hspace=0.0):
    """A gridspec of ``nrows`` x ``ncols`` panels with the figure's margins and the gaps
    between panels fixed in inches.

    A constrained layout measures every tick label of every axis at each draw: about 1 s
    of a two-panel spectrum figure's 1.9 s save, and seconds for a figure of many panels.
    """
    width, height = fig.get_size_inches()
    panel_w = (width - left - right - (ncols - 1) * wspace) / ncols
    panel_h = (height - bottom - top - (nrows - 1) * hspace) / nrows
    return fig.add_gridspec(nrows, ncols, left=left / width, right=1.0 - right / width, bottom=bottom / height,
                            top=1.0 - top / height, wspace=wspace / panel_w, hspace=hspace / panel_h)


def feature_intervals(result):
    """(median, lo68, hi68) in a0 of every Efimov feature a fit determines (sampled, or tied
    to a sampled a_-; :meth:`lossfit.inference.result.FitResult.feature_samples`), in the
    order a_-, a*, a_+."""
    fitted = result.feature_samples()
    return {name: result.interval(name) for name in FEATURES if name in fitted}


def temperature_label(t):
    """A temperature (nK) as given (15 -> "15 nK"); a derived one such as a group median
    or a fitted time average to three digits (90.2559 -> "≈90.3 nK")."""
    given = f"{t:g}"
    digits = sum(ch.isdigit() for ch in given.lstrip("0.").split("e")[0])
    return f"{given} nK" if digits <= 4 else f"≈{t:.3g} nK"

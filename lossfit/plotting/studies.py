"""Figures of the analysis studies: the temperature study of a fitted feature."""

__all__ = ["temperature_study_plot"]

import matplotlib.pyplot as plt
import numpy as np

from ._axes import tidy_log_axis

_SYMBOLS = {"a_minus": r"$a_-$", "a_star": r"$a_*$"}


def temperature_study_plot(study, *, fig=None):
    """Fitted position against temperature: the threshold-law (apparent) and the thermally
    averaged fits with 68 % intervals, and the joint thermal fit as a band.

    Parameters
    ----------
    study : TemperatureStudy
        From :func:`lossfit.inference.temperature_study.temperature_study`.

    Returns
    -------
    matplotlib.figure.Figure
    """
    if fig is None:
        fig = plt.figure(figsize=(5.6, 4.2), layout="constrained")
    ax = fig.add_subplot()
    t = np.array([r["temperature_nK"] for r in study.rows])
    for key, label, marker, colour, shift in (("apparent", "zero-energy law (apparent)", "s", "C1", 0.97),
                                              ("thermal", "thermally averaged, exact", "o", "C0", 1.03)):
        med = np.array([r[key][0] for r in study.rows])
        lo = np.array([r[key][1] for r in study.rows])
        hi = np.array([r[key][2] for r in study.rows])
        ax.errorbar(t * shift, np.abs(med), yerr=[np.abs(med) - np.abs(hi), np.abs(lo) - np.abs(med)]
                    if med[0] < 0 else [med - lo, hi - med], fmt=marker, color=colour, capsize=3, label=label)
    j = np.abs(np.array(study.joint))
    ax.axhspan(min(j[1], j[2]), max(j[1], j[2]), color="C0", alpha=0.2, lw=0, label="joint thermal fit (68 %)")
    ax.axhline(j[0], color="C0", lw=1.0)
    ax.set_xscale("log")
    tidy_log_axis(ax.xaxis)
    symbol = _SYMBOLS.get(study.feature, study.feature)
    ax.set_xlabel("temperature (nK)")
    ax.set_ylabel(rf"$|${symbol}$|$ ($a_0$)")
    ax.set_title(rf"{symbol} against temperature; consistency $\chi^2$ = {study.chi2:.2f} ({study.dof} dof, "
                 rf"p = {study.p_value:.2f})", fontsize=9)
    ax.legend(fontsize=8)
    return fig

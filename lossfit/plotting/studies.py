"""Figures of the analysis studies: the temperature study of a fitted feature and the
field calibration from dimer binding energies."""

__all__ = ["temperature_study_plot", "binding_energy_plot"]

import matplotlib.pyplot as plt
import numpy as np

from ..experiment.binding import binding_energy_khz
from ._axes import SYMBOLS, tidy_log_axis


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
    symbol = SYMBOLS.get(study.feature, study.feature)
    ax.set_xlabel("temperature (nK)")
    ax.set_ylabel(rf"$|${symbol}$|$ ($a_0$)")
    ax.set_title(rf"{symbol} against temperature; consistency $\chi^2$ = {study.chi2:.2f} ({study.dof} dof, "
                 rf"p = {study.p_value:.2f})", fontsize=9)
    ax.legend(fontsize=8)
    return fig


def binding_energy_plot(fits, B, E_b_kHz, E_b_err, *, species, fig=None):
    """Measured binding energies against the field with every fitted binding-energy model
    (top, log scale) and the normalised residuals of each (bottom).

    Parameters
    ----------
    fits : list of BindingEnergyFit
        From :func:`lossfit.experiment.feshbach.compare_binding_models` (best first).
    B, E_b_kHz, E_b_err : array_like
        The data: fields (G), E_b/h and its error (kHz).
    species : str or Species

    Returns
    -------
    matplotlib.figure.Figure
    """
    b = np.asarray(B, dtype=float)
    e = np.asarray(E_b_kHz, dtype=float)
    err = np.asarray(E_b_err, dtype=float)
    if fig is None:
        fig = plt.figure(figsize=(6.0, 5.2), layout="constrained")
    ax, axr = fig.subplots(2, 1, sharex=True, height_ratios=(3, 1))
    ax.errorbar(b, e, yerr=err, fmt="o", ms=4, color="k", capsize=2, label="data", zorder=3)
    fine = np.linspace(b.min(), b.max(), 300)
    for i, f in enumerate(fits):
        a_fine = f.resonance.a(fine)
        r_star = f.r_star if f.model == "effective-range" else None
        ax.plot(fine, binding_energy_khz(a_fine, species, model=f.model, r_star=r_star), color=f"C{i}",
                lw=1.4, label=f"{f.model}: $\\chi^2$ = {f.chi2:.1f} ({f.dof} dof)")
        axr.plot(b, f.residuals, "o", ms=3, color=f"C{i}")
    ax.set_yscale("log")
    ax.set_ylabel(r"$E_b/h$ (kHz)")
    ax.legend(fontsize=8)
    axr.axhline(0.0, color="0.5", lw=0.7)
    axr.set_xlabel("magnetic field $B$ (G)")
    axr.set_ylabel(r"(model $-$ data)/$\sigma$")
    best = fits[0]
    ax.set_title(rf"best: {best.model}, $B_0$ = {best.params[0]:.4f}({1e4 * best.errors[0]:.0f}) G", fontsize=9)
    return fig

"""Figures for decay-curve fits: each curve with its fit and residuals; the derived spectrum."""

__all__ = ["curves_plot", "derived_spectrum_plot"]

import math

import matplotlib.pyplot as plt
import numpy as np
from matplotlib.ticker import MaxNLocator

from ..data.curves import check_curves
from ..errors import LossfitValueError
from ..experiment.decay import simulate_decay
from ..experiment.trap import as_trap
from ._axes import grid_in_inches, temperature_label, tidy_log_axis
from .spectra import spectrum_plot


def _measured(solution, curve):
    """The model of what a curve's data measure: the dimer number of a dimer curve, else the
    number an image counts (N + 2 N_D where the explicit dimer kinetics runs and the curve
    counts atoms in shallow dimers, the free atoms N otherwise)."""
    return solution.dimers if curve.kind == "dimers" else solution.counted


def _global_models(result, t_fine):
    """Median-posterior model of every curve from a global FitResult: (fine, at data, time
    average of the fitted T(t) at the data's times on the measured temperature scale, nK)."""
    lik = result.likelihood
    if not hasattr(lik, "nuisances"):
        raise LossfitValueError("result", "needs a FitResult of lossfit.inference.global_fit.fit_curves")
    values = result.median_values()
    nuis = lik.nuisances(result.efimov(), values)
    out = []
    for j, (c, p) in enumerate(zip(lik.curves, nuis)):
        s_t = p["temperature_scale"]
        kw = dict(species=lik.species, trap_hz=as_trap(c), t0_nK=p["t0_nK"] / s_t,
                  recombination_heating_nK=float(lik.recombination_heating[j]), counts_dimers=p["counts_dimers"])
        if c.kind == "dimers":
            kw.update(n0=p["n_atoms0"], n_dimers0=p["n0"], l3=0.0, beta=p["table"], gamma_dimer=p["gamma"])
        else:
            kw.update(n0=p["n0"], l3=p["table"], gamma=p["gamma"])
        data = simulate_decay(c.t, **kw)
        out.append((_measured(simulate_decay(t_fine[j], **kw), c), _measured(data, c),
                    float(np.mean(s_t * data.temperature))))
    return out


def _curve_models(fits, t_fine, species):
    """Models of per-curve fits (constant L3 or beta): (fine, at data, time-averaged fitted
    temperature in nK) per curve."""
    out = []
    for f, tf in zip(fits, t_fine):
        c, p = f.curve, f.params
        kw = dict(species=species, trap_hz=as_trap(c), t0_nK=p["t0_nK"],
                  recombination_heating_nK=f.recombination_heating_nK)
        if c.kind == "dimers":
            kw.update(n0=p["n_atoms0"], n_dimers0=p["n0"], l3=0.0, beta=p["value"], gamma_dimer=p["gamma"])
        else:
            kw.update(n0=p["n0"], l3=p["value"], gamma=p["gamma"])
        out.append((_measured(simulate_decay(tf, **kw), c), f.model_atoms, f.temperature))
    return out


def _temperature_line(curve, fitted):
    """The fitted temperature of a curve with the measured one in brackets: the time
    average over the hold of a measured T(t), or the single initial value given."""
    if curve.temperature_series:
        measured = f"{temperature_label(float(np.mean(curve.temperature)))} measured"
    else:
        measured = f"$T_0$ {temperature_label(curve.initial_temperature)} measured"
    return rf"$\langle T\rangle$ {temperature_label(fitted)} fitted ({measured})"


def curves_plot(curves=None, *, fits=None, result=None, species=None, ncols=5, max_curves=None, fig=None):
    """Each curve's data with its fitted model (top) and normalised residuals (bottom).

    The model drawn is what the data are compared with: for atom curves at a > 0 under the
    global fit's explicit dimer kinetics, the counted number N + 2 N_D when the curve
    counts atoms in shallow dimers (``DecayCurve.counts_dimers``). Each panel's title gives
    the curve's label and its fitted temperature, the time average of the fitted T(t) over
    the hold (the global fit's where given, else the per-curve fit's: the temperature of
    the derived spectrum), with the measured one in brackets.

    Parameters
    ----------
    curves : sequence of DecayCurve, optional
        Default: the curves of ``fits`` or ``result``.
    fits : list of CurveFit, optional
        Per-curve least-squares fits (:func:`lossfit.inference.curve_fits.fit_curve`): dashed lines.
    result : FitResult, optional
        A global fit (:func:`lossfit.inference.global_fit.fit_curves`): solid lines at the
        posterior medians, nuisances re-solved there.
    species : str or Species, optional
        Needed with ``fits`` only (the global result knows its species).
    ncols : int
        Panels per row.
    max_curves : int, optional
        Plot only the first so many curves.

    Returns
    -------
    matplotlib.figure.Figure
    """
    if fits is None and result is None:
        raise LossfitValueError("fits", "give per-curve fits, a global result, or both")
    if curves is None:
        curves = [f.curve for f in fits] if fits is not None else result.likelihood.curves
    curves = check_curves(curves)
    if fits is not None:
        if len(fits) != len(curves):
            raise LossfitValueError("fits", f"has {len(fits)} entries for {len(curves)} curves")
        if species is None:
            raise LossfitValueError("species", "is needed to draw the per-curve fits")
    if result is not None and len(result.likelihood.curves) != len(curves):
        raise LossfitValueError("result", "was fitted to a different number of curves")
    n = len(curves) if max_curves is None else min(int(max_curves), len(curves))
    t_fine = [np.linspace(0.0, c.t[-1], 120) for c in curves]
    glob = _global_models(result, t_fine) if result is not None else None
    per = _curve_models(fits, t_fine, species) if fits is not None else None
    ncols = max(1, min(int(ncols), n))
    nrows = math.ceil(n / ncols)
    if fig is None:
        fig = plt.figure(figsize=(2.9 * ncols, 3.2 * nrows))
    # the two-line titles above, y labels left, the tick and axis labels below each panel
    outer = grid_in_inches(fig, nrows, ncols, left=0.85, right=0.12, bottom=0.5, top=0.45, wspace=0.7, hspace=0.75)
    for j in range(n):
        c = curves[j]
        inner = outer[j // ncols, j % ncols].subgridspec(2, 1, height_ratios=(3, 1), hspace=0.05)
        ax = fig.add_subplot(inner[0])
        axr = fig.add_subplot(inner[1], sharex=ax)
        ax.errorbar(c.t, c.atoms, yerr=c.atoms_err, fmt="o", ms=3, color="k", elinewidth=0.7, capsize=1.5)
        for models, style, name in ((glob, "-", "global"), (per, "--", "per curve")):
            if models is None:
                continue
            fine, at_data, _ = models[j]
            line, = ax.plot(t_fine[j], fine, style, lw=1.3, label=name)
            axr.plot(c.t, (c.atoms - at_data) / c.atoms_err, "o", ms=2.5, color=line.get_color())
        axr.axhline(0.0, color="0.5", lw=0.7)
        axr.set_ylim(-4, 4)
        # the temperature the spectrum figures use: the global fit's where there is one
        fitted = (glob if glob is not None else per)[j][2]
        ax.set_title(f"{c.label}\n{_temperature_line(c, fitted)}", fontsize=8)
        ax.tick_params(labelsize=8, labelbottom=False)
        axr.tick_params(labelsize=8)
        # at most 4 time ticks: the hold-time labels of neighbouring panels must not collide
        axr.xaxis.set_major_locator(MaxNLocator(nbins=4, prune="upper"))
        ax.yaxis.get_offset_text().set_fontsize(8)
        if j % ncols == 0:
            ax.set_ylabel("dimers" if c.kind == "dimers" else "atoms", fontsize=9)
            axr.set_ylabel("resid. (σ)", fontsize=9)
        if j // ncols == nrows - 1 or j + ncols >= n:
            axr.set_xlabel("hold time (s)", fontsize=9)
        if j == 0:
            ax.legend(fontsize=8)
    return fig


def derived_spectrum_plot(spectra=None, *, result=None, fig=None, **kwargs):
    """The loss spectrum derived from per-curve fits (the two-stage route).

    With ``result`` (a global fit) this is :func:`lossfit.plotting.spectrum_plot` over
    the per-curve points grouped by temperature, with the global posterior's median
    and 68/95 % bands. Without it, the points of ``spectra`` alone.

    Parameters
    ----------
    spectra : list of LossSpectrum, optional
        From :func:`lossfit.inference.curve_fits.spectrum_from_curves`.
    result : FitResult, optional
    **kwargs
        Passed to :func:`lossfit.plotting.spectrum_plot`.

    Returns
    -------
    matplotlib.figure.Figure
    """
    if result is not None:
        return spectrum_plot(result, fig=fig, **kwargs)
    if not spectra:
        raise LossfitValueError("spectra", "give the derived spectra or a global result")
    if fig is None:
        fig = plt.figure(figsize=(5.2 * len(spectra), 4.2))
    grid = grid_in_inches(fig, 1, len(spectra), left=0.95, right=0.15, bottom=0.6, top=0.45, wspace=0.95)
    axes = [fig.add_subplot(grid[0, j]) for j in range(len(spectra))]
    for ax, s in zip(axes, spectra):
        sc = ax.scatter(np.abs(s.a), s.value, c=s.temperature, s=14, cmap="viridis", zorder=3)
        ax.errorbar(np.abs(s.a), s.value, yerr=s.error, fmt="none", ecolor="0.4", elinewidth=0.7, zorder=2)
        ax.set_xscale("log")
        ax.set_yscale("log")
        tidy_log_axis(ax.xaxis)
        side = "a < 0" if (s.a < 0).all() else "a > 0" if (s.a > 0).all() else "both sides"
        ax.set_xlabel(r"$|a|$ ($a_0$), " + side)
        ax.set_ylabel(r"$L_3$ (cm$^6$/s)" if s.kind == "l3" else r"$\beta$ (cm$^3$/s)")
        ax.set_title(s.label, fontsize=9)
        fig.colorbar(sc, ax=ax, label="temperature (nK)")
    return fig
